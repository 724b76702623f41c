import { createRandom } from "../numeric/index.js";
import { createInterface } from "node:readline";
import {
  describeRounding,
  type OverflowMode,
  type RoundOptions,
  type RoundingDescription,
  type RoundingMode,
} from "../formats/index.js";
import { formatValue } from "../report/number.js";
import type { Command } from "commander";
import { STORAGE_FORMATS } from "./commands/round.js";
import { unknownOptionMessage } from "./commands/define.js";
import { OutputError, UserError } from "./errors.js";
import { parseFormatList } from "./lists.js";

const ACCEPTED_VALUES =
  "accepted: a decimal number (1.5, -65519, 1e-8, inf, nan) or 0x followed by 16 hex digits (a binary64 bit pattern)";

const DECIMAL = /^[+-]?(?:\d+\.?\d*|\.\d+)(?:e[+-]?\d+)?$/i;
const SPECIAL = /^([+-]?)(inf|infinity|nan)$/i;
const HEX_PATTERN = /^0x[0-9a-f]{16}$/i;

/**
 * Parse one value as typed by a user: a decimal number, inf/nan, or a 0x-prefixed 16-hex-digit binary64 pattern.
 * Returns the value, or an error message naming what is accepted.
 */
export function parseValue(text: string): { value: number } | { error: string } {
  const trimmed = text.trim();
  if (DECIMAL.test(trimmed)) {
    const value = Number(trimmed);
    // a finite decimal past binary64's largest finite value reads as infinity there (IEEE 754-2019 §4.3.1, §7.4): say so
    // rather than round an infinity and report no error
    if (!Number.isFinite(value)) {
      return { error: `${trimmed} is beyond binary64's range (largest finite ${show(Number.MAX_VALUE)}), where values are read first; give inf for infinity` };
    }
    // likewise at the bottom: a nonzero decimal below half binary64's smallest subnormal 2^-1074 reads as 0 (IEEE 754-2019
    // §4.3.1), and its rounding would show an exact zero with no error at all
    if (value === 0 && /[1-9]/.test(trimmed.replace(/e.*$/i, ""))) {
      return { error: `${trimmed} is below binary64's range (smallest subnormal ${show(Number.MIN_VALUE)}), where values are read first, and would read as 0; give 0 for zero` };
    }
    return { value };
  }
  const special = SPECIAL.exec(trimmed);
  if (special) {
    const [, sign, word] = special;
    if (word?.toLowerCase() === "nan") return { value: NaN };
    return { value: sign === "-" ? -Infinity : Infinity };
  }
  if (HEX_PATTERN.test(trimmed)) {
    const view = new DataView(new ArrayBuffer(8));
    view.setBigUint64(0, BigInt(trimmed));
    return { value: view.getFloat64(0) };
  }
  if (/^[+-]?0x/i.test(trimmed)) {
    return { error: `malformed binary64 bit pattern "${text}": expected 0x followed by exactly 16 hex digits (e.g. 0x3ff0000000000000)` };
  }
  if (trimmed === "") return { error: `empty value; ${ACCEPTED_VALUES}` };
  return { error: `"${text}" is not a number; ${ACCEPTED_VALUES}` };
}

/** A seeded uniform source on [0, 1) for --rounding stochastic (the shared generator of src/numeric). */
function seededUniform(seed: number): () => number {
  const source = createRandom(seed);
  return () => source.next();
}

/** A number for the text table: shortest round-trip form (exponents written 1e38, as in the error columns), with the sign of zero kept. */
function show(value: number): string {
  if (Object.is(value, -0)) return "-0";
  if (Number.isNaN(value)) return "NaN";
  if (!Number.isFinite(value)) return value > 0 ? "inf" : "-inf";
  return String(value).replace("e+", "e");
}

/**
 * An error for the text table, written as the other tables write numbers (formatValue: plain from 1e-4 up to 1e6,
 * else 2.441e-5) but with 4 significant digits where they use 3: an error is read against the format's unit
 * roundoff (2^-11 = 0.0004883 in binary16), and with 3 digits an error of 0.0004878 would print as equal to it.
 */
function showError(value: number): string {
  if (Number.isNaN(value)) return "-";
  return formatValue(value, 4);
}

/** A number for JSON: finite numbers as numbers; ±Infinity and NaN as strings ("Infinity", "-Infinity", "NaN"); −0 as 0. */
function jsonNumber(value: number): number | string {
  return Number.isFinite(value) ? value : String(value);
}

const COLUMNS = ["value", "format", "rounded", "bits", "class", "abs error", "rel error"] as const;
const WIDTHS = [24, 8, 24, 18, 9, 10, 10];

/** One row of the streaming text table, padded to fixed widths (longer cells push the rest right). */
function textLine(cells: readonly string[]): string {
  const padded = cells.map((cell, i) => {
    const width = WIDTHS[i] ?? 0;
    // numbers right-aligned, words left-aligned
    return i === 1 || i === 4 ? cell.padEnd(width) : cell.padStart(width);
  });
  return padded.join("  ").trimEnd() + "\n";
}

function textRow(input: string, d: RoundingDescription): string {
  return textLine([input, d.format, show(d.rounded), d.bits, d.class, showError(d.absoluteError), showError(d.relativeError)]);
}

function jsonRow(input: string, d: RoundingDescription): string {
  return (
    JSON.stringify({
      input,
      value: jsonNumber(d.value),
      format: d.format,
      rounded: jsonNumber(d.rounded),
      bits: d.bits,
      class: d.class,
      flushed: d.flushed,
      absoluteError: jsonNumber(d.absoluteError),
      relativeError: jsonNumber(d.relativeError),
    }) + "\n"
  );
}

interface RoundCommandOptions {
  /** absent: every storage format */
  to?: string;
  rounding: RoundingMode;
  overflow?: OverflowMode;
  flushSubnormals?: boolean;
  seed: string;
  json?: boolean;
}

/**
 * Writes through a buffer, flushing at 64 KiB and waiting for the stream to drain (a million lines stay flat in
 * memory). When the stream fails, its error is rethrown from the next write as an OutputError, which stops the
 * command: quietly when the reader went away (`| head`: main treats a broken pipe as a normal end), else with the reason.
 */
class Output {
  private chunks: string[] = [];
  private size = 0;
  private broken: Error | undefined;
  private wake: (() => void) | undefined;
  constructor() {
    process.stdout.on("error", (error: Error) => {
      this.broken = new OutputError(error);
      this.wake?.();
    });
  }
  async write(text: string): Promise<void> {
    if (this.broken) throw this.broken;
    this.chunks.push(text);
    this.size += text.length;
    if (this.size >= 65536) await this.flush();
  }
  async flush(): Promise<void> {
    if (this.broken) throw this.broken;
    if (this.size === 0) return;
    const text = this.chunks.join("");
    this.chunks = [];
    this.size = 0;
    if (!process.stdout.write(text)) {
      await new Promise<void>((resolve) => {
        this.wake = resolve;
        process.stdout.once("drain", resolve);
      });
      this.wake = undefined;
    }
    if (this.broken) throw this.broken;
  }
}

function parseSeed(text: string): number {
  if (!/^\d+$/.test(text) || Number(text) > 0xffffffff) {
    throw new UserError(`--seed "${text}" is not accepted; expected a whole number from 0 to 4294967295`);
  }
  return Number(text);
}

async function* stdinLines(): AsyncGenerator<string> {
  const lines = createInterface({ input: process.stdin, crlfDelay: Infinity });
  for await (const line of lines) yield line;
}

/** `headroom round VALUE... [--to FORMAT[,FORMAT...]]`: each value rounded into each format (each storage format by default). */
export async function runRound(values: string[], options: RoundCommandOptions, command: Command): Promise<void> {
  const unknown = values.find((text) => /^--?[a-z]/i.test(text) && !SPECIAL.test(text));
  if (unknown !== undefined) {
    throw new UserError(unknownOptionMessage(unknown, command, " (values may be decimal numbers, inf, nan or 0x patterns)"));
  }
  const formats = options.to === undefined ? STORAGE_FORMATS : parseFormatList("--to", options.to);
  const roundOptions: RoundOptions = {
    mode: options.rounding,
    ...(options.overflow !== undefined ? { overflow: options.overflow } : {}),
    flushSubnormals: options.flushSubnormals === true,
    ...(options.rounding === "stochastic" ? { random: seededUniform(parseSeed(options.seed)) } : {}),
  };
  if (values.filter((v) => v === "-").length > 1) throw new UserError(`"-" (read stdin) may be given once`);
  // check every argument before printing anything
  for (const text of values) {
    if (text === "-") continue;
    const parsed = parseValue(text);
    if ("error" in parsed) throw new UserError(parsed.error);
  }
  const out = new Output();
  const row = options.json ? jsonRow : textRow;
  let headerDue = !options.json;
  const emit = async (input: string, value: number): Promise<void> => {
    if (headerDue) {
      headerDue = false;
      await out.write(textLine([...COLUMNS]));
    }
    for (const format of formats) await out.write(row(input, describeRounding(format, value, roundOptions)));
  };
  try {
    for (const text of values) {
      if (text !== "-") {
        const parsed = parseValue(text) as { value: number };
        await emit(text, parsed.value);
        continue;
      }
      let lineNumber = 0;
      let count = 0;
      for await (const line of stdinLines()) {
        lineNumber++;
        if (line.trim() === "") continue;
        const parsed = parseValue(line);
        if ("error" in parsed) throw new UserError(`stdin line ${lineNumber}: ${parsed.error}`);
        count++;
        await emit(line.trim(), parsed.value);
      }
      if (count === 0) throw new UserError(`no values on stdin; expected one value per line (${ACCEPTED_VALUES})`);
    }
  } finally {
    await out.flush();
  }
}
