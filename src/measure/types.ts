/**
 * Plain data shared by the tensor-file readers, the statistics accumulators and the renderers.
 * Everything here is JSON-able.
 */

/** Floating-point element types headroom reads from tensor files (safetensors names; .npy maps onto them). */
export const FLOAT_DTYPES = ["F64", "F32", "F16", "BF16", "F8_E4M3", "F8_E5M2"] as const;
export type FloatDtype = (typeof FLOAT_DTYPES)[number];

/** Bytes per element of each float dtype. */
export const DTYPE_BYTES: Readonly<Record<FloatDtype, number>> = {
  F64: 8,
  F32: 4,
  F16: 2,
  BF16: 2,
  F8_E4M3: 1,
  F8_E5M2: 1,
};

/** Where one float tensor's data lies in its file, validated against the file before any data is read. */
export interface TensorLayout {
  name: string;
  dtype: FloatDtype;
  shape: number[];
  /** product of the shape (1 for a scalar, 0 when a dimension is 0) */
  elements: number;
  /** absolute byte offset of the first data byte in the file */
  begin: number;
  /** bytes of data: elements × dtype size */
  byteLength: number;
  /** byte order of the stored elements */
  littleEndian: boolean;
  /** element order of a multi-dimensional tensor: C (last index fastest) or Fortran (first index fastest) */
  order: "C" | "F";
}

/** A tensor listed in a file but not measured (integer, bool, complex or other non-float data). */
export interface SkippedTensor {
  name: string;
  /** the dtype as the file spells it */
  dtype: string;
  shape: number[];
  reason: string;
}

/**
 * A problem with a file or one of its tensors, as a value (never thrown).
 * `byteOffset` is the absolute position in the file where the problem was found, absent when no position means
 * anything (the file cannot be opened, is too short, is not of a kind read here; a tensor refused as a whole).
 */
export interface ScanIssue {
  file: string;
  tensor?: string;
  byteOffset?: number;
  message: string;
}

/** The validated table of contents of one tensor file. */
export interface TensorFileLayout {
  file: string;
  kind: "safetensors" | "npy";
  /** file size in bytes */
  size: number;
  tensors: TensorLayout[];
  skipped: SkippedTensor[];
  /** problems with single tensors; the other tensors of the file are still read */
  issues: ScanIssue[];
  /** free-form string metadata from a safetensors header (`__metadata__`) */
  metadata?: Record<string, string>;
}

/** One issue on one line: file, then the tensor and the byte offset when there are, then what is wrong. */
export function issueLine(issue: ScanIssue): string {
  const tensor = issue.tensor !== undefined ? `tensor ${JSON.stringify(issue.tensor)}, ` : "";
  const at = issue.byteOffset !== undefined ? `byte ${issue.byteOffset}: ` : "";
  return `${issue.file}: ${tensor}${at}${issue.message}`;
}
