/**
 * Lists given on the command line: one reading for every command, so a mistyped list gets the same message whichever
 * command it was given to. `splitList` splits and trims; `parseFormatList` reads format names on top of it.
 */
import { FORMAT_NAMES, getFormat, type Format } from "../formats/index.js";
import { didYouMeanFormat } from "../spec/issues.js";
import { UserError } from "./errors.js";

/**
 * The items of a comma-separated list option, trimmed; `values` holds one string per occurrence of a repeatable
 * option (or per argument). An empty item (two commas, or one at an end) is refused rather than skipped: it is most
 * often a name that was lost. `hint` ends the messages (what is accepted).
 */
export function splitList(label: string, values: string | readonly string[], noun: string, hint: string): string[] {
  const items: string[] = [];
  for (const value of typeof values === "string" ? [values] : values) {
    if (value.trim() === "") throw new UserError(`${label}: no ${noun} given; ${hint}`);
    const parts = value.split(",").map((part) => part.trim());
    if (parts.includes("")) throw new UserError(`${label}: empty item in ${JSON.stringify(value)}; ${hint}`);
    items.push(...parts);
  }
  if (items.length === 0) throw new UserError(`${label}: no ${noun} given; ${hint}`);
  return items;
}

const ACCEPTED_FORMATS = `accepted: ${FORMAT_NAMES.join(", ")} (comma-separated)`;

/**
 * Number formats named by an option (`--format`, `--to`) or by arguments (`headroom formats NAME...`): names and
 * the accepted aliases (fp16, bf16) as getFormat takes them, case-insensitive. A format named twice, by the same name
 * or by an alias, is judged once, in the place it was first named: the list is a set. An unknown name is an input
 * error with the hint a spec would get: the format an alias only suggested stands for (f16), else the nearest name.
 */
export function parseFormatList(label: string, values: string | readonly string[]): Format[] {
  const formats: Format[] = [];
  for (const item of splitList(label, values, "format", ACCEPTED_FORMATS)) {
    let format: Format;
    try {
      format = getFormat(item);
    } catch {
      throw new UserError(`${label}: unknown format ${JSON.stringify(item)}${didYouMeanFormat(item.toLowerCase(), FORMAT_NAMES)}; ${ACCEPTED_FORMATS}`);
    }
    if (!formats.includes(format)) formats.push(format);
  }
  return formats;
}
