/** The formats headroom knows, by their standard or trade names. */
export const FORMAT_NAMES = ["binary16", "bfloat16", "binary32", "binary64", "tf32", "e5m2", "e4m3"] as const;

export type FormatName = (typeof FORMAT_NAMES)[number];

export function isFormatName(name: string): name is FormatName {
  return (FORMAT_NAMES as readonly string[]).includes(name);
}
