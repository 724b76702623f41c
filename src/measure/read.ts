/**
 * The tensor-file readers: the only file I/O of headroom outside the CLI. Files are opened read-only; the header is
 * validated before any data is read; data is read in fixed-size chunks into buffers allocated once per file, and
 * never outside the byte ranges the header names.
 */
import { open, type FileHandle } from "node:fs/promises";
import { basename } from "node:path";
import { chunkDecoder, type ChunkDecoder } from "./decode.js";
import { LENT_BUFFER_BYTES, lendBuffer, returnBuffer } from "./fast32.js";
import { NPY_MAGIC, parseNpyHeader, parseNpyPrefix } from "./npy.js";
import { parseSafetensorsHeader, parseSafetensorsPrefix } from "./safetensors.js";
import { DTYPE_BYTES, type ScanIssue, type TensorFileLayout, type TensorLayout } from "./types.js";

/** Elements per chunk: 256 Ki elements (2 MiB of binary64, 1 MiB of binary32), small enough to stay in cache between the read and the passes over it. */
export const CHUNK_ELEMENTS = 1 << 18;

/** An open tensor file with its validated layout. Close it with `close()`. */
export interface OpenTensorFile {
  layout: TensorFileLayout;
  handle: FileHandle;
}

/**
 * Open `path` read-only and validate its header. The content decides the kind: .npy when the file starts with NumPy's
 * magic, else safetensors; a file named .npy that has neither the magic nor a safetensors start is refused as not a
 * .npy array (its safetensors errors would describe a format the user never meant).
 */
export async function openTensorFile(path: string): Promise<{ ok: true; file: OpenTensorFile } | { ok: false; issue: ScanIssue; size?: number }> {
  let handle: FileHandle;
  try {
    handle = await open(path, "r");
  } catch (error) {
    return { ok: false, issue: { file: path, message: `cannot open: ${describeFsError(error)}` } };
  }
  try {
    const stat = await handle.stat();
    if (!stat.isFile()) throw new NotAFile();
    const size = stat.size;
    const first = await readExactly(handle, 0, Math.min(12, size));
    const isNpy = first.length >= 6 && NPY_MAGIC.every((b, i) => first[i] === b);
    if (!isNpy && isZip(first)) {
      await handle.close();
      return { ok: false, issue: { file: path, message: ZIP_MESSAGE }, size };
    }
    if (!isNpy && /\.npy$/i.test(path) && !looksLikeSafetensors(first, size)) {
      await handle.close();
      return { ok: false, issue: { file: path, message: notNpyMessage(first) }, size };
    }
    // a file of another kind (a spec, a table) would otherwise be read as a safetensors header length of its first 8 bytes
    if (!isNpy && !/\.safetensors$/i.test(path) && !looksLikeSafetensors(first, size)) {
      await handle.close();
      return { ok: false, issue: { file: path, message: notTensorFileMessage(first) }, size };
    }
    const parsed = isNpy ? await readNpyLayout(handle, path, first, size) : await readSafetensorsLayout(handle, path, first, size);
    if (!parsed.ok) {
      await handle.close();
      // the file's size is known once it is open, whatever its header holds
      return { ok: false, issue: parsed.issue, size };
    }
    return { ok: true, file: { layout: parsed.layout, handle } };
  } catch (error) {
    await handle.close().catch(() => {});
    const message = error instanceof NotAFile ? "not a regular file" : `cannot read: ${describeFsError(error)}`;
    return { ok: false, issue: { file: path, message } };
  }
}

class NotAFile extends Error {}

// a safetensors file starts with its header length (8 bytes, little-endian) and the JSON header's "{" (whitespace may
// come first): the format's public description
function looksLikeSafetensors(first: Uint8Array, size: number): boolean {
  if (first.length < 9) return false;
  const length = new DataView(first.buffer, first.byteOffset, 8).getBigUint64(0, true);
  const start = first[8]!;
  return length >= 2n && 8n + length <= BigInt(size) && (start === 0x7b || start === 0x20 || start === 0x09 || start === 0x0a || start === 0x0d);
}

// a zip archive starts with a local file header, "PK\x03\x04" (PKWARE's APPNOTE.TXT §4.3.7); NumPy's .npz is one
function isZip(first: Uint8Array): boolean {
  return first.length >= 4 && first[0] === 0x50 && first[1] === 0x4b && first[2] === 0x03 && first[3] === 0x04;
}

const ZIP_MESSAGE = "a zip archive (as NumPy's .npz is), not a safetensors file or a .npy array: extract its .npy arrays and give those";

function notNpyMessage(first: Uint8Array): string {
  const shown = [...first.subarray(0, 6)].map((b) => b.toString(16).padStart(2, "0")).join(" ");
  const start = first.length === 0 ? "it is empty" : `it starts with ${shown}`;
  return `not a .npy array: it does not start with NumPy's magic "\\x93NUMPY" (${start}), nor is it a safetensors file`;
}

function notTensorFileMessage(first: Uint8Array): string {
  const shown = [...first.subarray(0, 6)].map((b) => b.toString(16).padStart(2, "0")).join(" ");
  const start = first.length === 0 ? "it is empty" : `it starts with ${shown}`;
  return `not a safetensors file or a .npy array: it starts with neither a safetensors header (an 8-byte length, then "{") nor NumPy's magic "\\x93NUMPY" (${start})`;
}

async function readSafetensorsLayout(handle: FileHandle, path: string, first: Uint8Array, size: number) {
  const prefix = parseSafetensorsPrefix(path, first, size);
  if (!prefix.ok) return prefix;
  const header = await readExactly(handle, 8, prefix.headerLength);
  return parseSafetensorsHeader(path, header, size);
}

async function readNpyLayout(handle: FileHandle, path: string, first: Uint8Array, size: number) {
  const prefix = parseNpyPrefix(path, first, size);
  if (!prefix.ok) return prefix;
  const header = await readExactly(handle, prefix.prefixLength, prefix.headerLength);
  const name = basename(path).replace(/\.npy$/i, "");
  return parseNpyHeader(path, name, prefix.version, prefix.prefixLength, header, size);
}

/** Read `length` bytes at `position` into a fresh buffer; shorter when the file ends first. */
async function readExactly(handle: FileHandle, position: number, length: number): Promise<Buffer> {
  const buffer = Buffer.alloc(length);
  const filled = await readInto(handle, buffer, length, position);
  return filled === length ? buffer : buffer.subarray(0, filled);
}

/** Receives decoded values of each tensor, chunk by chunk, in file order. */
export interface TensorSink {
  /** a tensor's data is about to be read */
  begin(tensor: TensorLayout): void;
  /** the next values of the tensor; `first` is the index of values[0] within the tensor (storage order) */
  chunk(tensor: TensorLayout, values: Float32Array | Float64Array, first: number): void;
  /** all of the tensor's data was read (not called when reading failed) */
  end(tensor: TensorLayout): void;
}

/** Progress in bytes of tensor data read. */
export type ProgressCallback = (bytesRead: number) => void;

interface ChunkPlan {
  tensor: TensorLayout;
  position: number;
  bytes: number;
  first: number;
  last: boolean;
}

/**
 * Stream every tensor of an open file through `sink`. Reads are double-buffered: the next chunk is read while the
 * current one is decoded and measured. A short read (the file shrank after its header was checked) becomes an issue
 * for that tensor and reading goes on with the next one.
 */
export async function streamTensors(file: OpenTensorFile, sink: TensorSink, onProgress?: ProgressCallback): Promise<ScanIssue[]> {
  const issues: ScanIssue[] = [];
  const tensors = file.layout.tensors;
  if (tensors.length === 0) return issues;
  const widest = Math.max(...tensors.map((t) => DTYPE_BYTES[t.dtype]));
  // buffers lent from the binary32 counting kernel's memory, so its passes need no copy of the chunk; else allocated
  // here, not from Node's pool, so each buffer starts at offset 0 of its own ArrayBuffer and views stay aligned
  const lent: Uint8Array[] = [];
  const buffers = [0, 1].map(() => {
    const loan = CHUNK_ELEMENTS * widest <= LENT_BUFFER_BYTES ? lendBuffer() : null;
    if (!loan) return Buffer.allocUnsafeSlow(CHUNK_ELEMENTS * widest);
    lent.push(loan);
    return Buffer.from(loan.buffer, loan.byteOffset, CHUNK_ELEMENTS * widest);
  });
  let pending: Promise<number> | undefined;
  try {
    return await streamChunks(file, sink, buffers, (p) => (pending = p), onProgress);
  } finally {
    // a read still in flight (the sink threw) must end before its buffer is lent again
    await pending?.catch(() => 0);
    lent.forEach(returnBuffer);
  }
}

async function streamChunks(
  file: OpenTensorFile,
  sink: TensorSink,
  buffers: Buffer[],
  reading: (read: Promise<number>) => void,
  onProgress?: ProgressCallback,
): Promise<ScanIssue[]> {
  const issues: ScanIssue[] = [];
  const tensors = file.layout.tensors;
  const decoders = new Map<string, ChunkDecoder>();
  const decoderFor = (tensor: TensorLayout): ChunkDecoder => {
    const key = `${tensor.dtype}/${tensor.littleEndian}`;
    let decoder = decoders.get(key);
    if (!decoder) decoders.set(key, (decoder = chunkDecoder(tensor.dtype, tensor.littleEndian, CHUNK_ELEMENTS)));
    return decoder;
  };

  const plans = planChunks(tensors);
  let done = 0;
  let failed: TensorLayout | undefined;
  const read = (plan: ChunkPlan, buffer: Buffer) => {
    const p = readInto(file.handle, buffer, plan.bytes, plan.position);
    reading(p);
    return p;
  };
  let pending = plans.length > 0 ? read(plans[0]!, buffers[0]!) : undefined;
  for (let i = 0; i < plans.length; i++) {
    const plan = plans[i]!;
    const buffer = buffers[i % 2]!;
    const got = await pending!;
    const next = plans[i + 1];
    pending = next ? read(next, buffers[(i + 1) % 2]!) : undefined;
    if (failed === plan.tensor) continue;
    if (plan.first === 0) sink.begin(plan.tensor);
    if (got < plan.bytes) {
      failed = plan.tensor;
      issues.push({
        file: file.layout.file,
        tensor: plan.tensor.name,
        byteOffset: plan.position + got,
        message: "file ended before the tensor's data did (it changed after its header was read)",
      });
      continue;
    }
    const elementBytes = DTYPE_BYTES[plan.tensor.dtype];
    const values = decoderFor(plan.tensor).decode(buffer, plan.bytes / elementBytes);
    sink.chunk(plan.tensor, values, plan.first);
    if (plan.last) sink.end(plan.tensor);
    done += plan.bytes;
    onProgress?.(done);
  }
  if (pending) await pending;
  return issues;
}

function planChunks(tensors: readonly TensorLayout[]): ChunkPlan[] {
  const plans: ChunkPlan[] = [];
  for (const tensor of tensors) {
    const elementBytes = DTYPE_BYTES[tensor.dtype];
    if (tensor.elements === 0) {
      plans.push({ tensor, position: tensor.begin, bytes: 0, first: 0, last: true });
      continue;
    }
    for (let first = 0; first < tensor.elements; first += CHUNK_ELEMENTS) {
      const count = Math.min(CHUNK_ELEMENTS, tensor.elements - first);
      plans.push({ tensor, position: tensor.begin + first * elementBytes, bytes: count * elementBytes, first, last: first + count === tensor.elements });
    }
  }
  return plans;
}

/** Fill buffer[0, length) from the file at `position`; resolves to the bytes actually read (fewer at end of file). */
async function readInto(handle: FileHandle, buffer: Buffer, length: number, position: number): Promise<number> {
  let filled = 0;
  while (filled < length) {
    const { bytesRead } = await handle.read(buffer, filled, length - filled, position + filled);
    if (bytesRead === 0) break;
    filled += bytesRead;
  }
  return filled;
}

function describeFsError(error: unknown): string {
  const code = (error as { code?: unknown }).code;
  if (code === "ENOENT") return "no such file";
  if (code === "EACCES" || code === "EPERM") return "permission denied";
  if (code === "EISDIR") return "is a folder";
  return error instanceof Error ? error.message : String(error);
}
