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
