/**
 * The formats headroom knows, by their standard or trade names.
 * @example FORMAT_NAMES.length // => 7
 */
export const FORMAT_NAMES = ["binary16", "bfloat16", "binary32", "binary64", "tf32", "e5m2", "e4m3"] as const;

/**
 * One of FORMAT_NAMES.
 * @example const name: FormatName = "bfloat16";
 */
export type FormatName = (typeof FORMAT_NAMES)[number];

/**
 * Whether a string is exactly one of FORMAT_NAMES (no aliases; getFormat accepts those).
 * @example isFormatName("e4m3") // => true
 */
export function isFormatName(name: string): name is FormatName {
  return (FORMAT_NAMES as readonly string[]).includes(name);
}

/**
 * Another spelling of a format name. `accepted`: getFormat takes it, so every command-line list of formats does
 * (`--format fp16`). Otherwise it is only suggested ("did you mean") and never taken. Spec files take the names of
 * FORMAT_NAMES alone (specs/README.md), so a spec is offered every alias here as a suggestion and takes none.
 */
export interface FormatAlias {
  readonly format: FormatName;
  readonly accepted: boolean;
}

/**
 * The one table of other spellings, in lower case. Accepted: the spellings the command line took before this
 * table existed (README promises fp16, bf16, fp32), each naming one format wherever it is written. Suggested only:
 * short spellings (f16) and `float`, which is binary32 in C but binary64 in other languages: a guess is fine in a
 * hint, not as an answer. No other product's type names (our names are the standard's and the OCP spec's).
 * @example FORMAT_ALIASES["bf16"] // => { format: "bfloat16", accepted: true }
 */
export const FORMAT_ALIASES: Readonly<Record<string, FormatAlias>> = Object.freeze({
  fp16: { format: "binary16", accepted: true },
  float16: { format: "binary16", accepted: true },
  half: { format: "binary16", accepted: true },
  f16: { format: "binary16", accepted: false },
  bf16: { format: "bfloat16", accepted: true },
  fp32: { format: "binary32", accepted: true },
  float32: { format: "binary32", accepted: true },
  single: { format: "binary32", accepted: true },
  f32: { format: "binary32", accepted: false },
  float: { format: "binary32", accepted: false },
  fp64: { format: "binary64", accepted: true },
  float64: { format: "binary64", accepted: true },
  double: { format: "binary64", accepted: true },
  f64: { format: "binary64", accepted: false },
  "fp8-e5m2": { format: "e5m2", accepted: true },
  "fp8-e4m3": { format: "e4m3", accepted: true },
} satisfies Record<string, FormatAlias>);

/**
 * The alias a name is (case-insensitive, surrounding spaces ignored), accepted or only suggested; undefined for a
 * name that is no alias.
 * @example findAlias("F16") // => { format: "binary16", accepted: false }
 */
export function findAlias(name: string): FormatAlias | undefined {
  const key = name.trim().toLowerCase();
  return Object.hasOwn(FORMAT_ALIASES, key) ? FORMAT_ALIASES[key] : undefined;
}
