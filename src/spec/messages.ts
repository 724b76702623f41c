/**
 * Turns zod's validation issues into our messages: plain words, the value that was given, and a
 * "did you mean" where a key or a name looks misspelt. Unions are resolved to the branch the user
 * evidently meant, so one mistake gives one message.
 */
import type * as z from "zod";
import { FORMAT_NAMES } from "../formats/names.js";
import { didYouMean, didYouMeanFormat } from "./issues.js";
import { BARE_LAYER_TYPES, boundText, FINAL_MESSAGE, LAYER_TYPES, MAGNITUDE_RANGE, MAX_SIZE, SCALE_RANGE, WEIGHT_GROWTH_RANGE } from "./limits.js";

/** The lower and upper bounds that mark a value as beyond any real network (limits.ts), rather than impossible. */
const PLAUSIBLE_MINIMA: ReadonlySet<number> = new Set([MAGNITUDE_RANGE.min, SCALE_RANGE.min, WEIGHT_GROWTH_RANGE.min]);
const PLAUSIBLE_MAXIMA: ReadonlySet<number> = new Set([MAX_SIZE, MAGNITUDE_RANGE.max, SCALE_RANGE.max, WEIGHT_GROWTH_RANGE.max]);

/** A validation problem before it is given a file position. */
export interface RawIssue {
  path: (string | number)[];
  /** the problem is about the key itself (an unknown key), not its value */
  atKey: boolean;
  message: string;
}


/** How a value reads in a message. */
export function describeValue(value: unknown): string {
  if (value === undefined) return "nothing";
  if (value === null) return "an empty value";
  if (typeof value === "number") {
    if (Number.isNaN(value)) return ".nan";
    if (value === Infinity) return ".inf";
    if (value === -Infinity) return "-.inf";
    return String(value);
  }
  if (typeof value === "string") {
    const shown = value.length > 40 ? `${value.slice(0, 37)}...` : value;
    return `the string ${JSON.stringify(shown)}`;
  }
  if (typeof value === "boolean") return String(value);
  if (Array.isArray(value)) return "a list";
  if (typeof value === "object") return "a mapping";
  return typeof value;
}

/**
 * Why text that looks like a number or a boolean is not one, where one was expected: YAML 1.2's core schema (§10.3.2)
 * reads quoted scalars as strings, and has no digit separators (1_000) and no yes/no/on/off booleans (YAML 1.1's).
 */
function numberHint(input: unknown, expected: string): string {
  if (expected === "boolean" && typeof input === "string") {
    const word = input.trim().toLowerCase();
    if (word === "true" || word === "false") return " (quoted, so YAML reads it as text; remove the quotes)";
    if (/^(?:y|yes|on)$/.test(word)) return ` (YAML 1.2 reads ${input} as text; write true)`;
    if (/^(?:n|no|off)$/.test(word)) return ` (YAML 1.2 reads ${input} as text; write false)`;
    return "";
  }
  if ((expected !== "number" && expected !== "int") || typeof input !== "string") return "";
  const plain = input.trim();
  if (/^[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?$/.test(plain)) return " (quoted, so YAML reads it as text; remove the quotes)";
  if (/^[-+]?\d[\d_,]*(?:\.\d*)?(?:[eE][-+]?\d+)?$/.test(plain)) {
    return ` (YAML 1.2 has no digit separators; write ${plain.replace(/[_,]/g, "")})`;
  }
  return "";
}

const EXPECTED: Record<string, string> = {
  number: "a number",
  int: "an integer",
  string: "a string",
  boolean: "true or false",
  object: "a mapping",
  record: "a mapping",
  array: "a list",
  tuple: "a list",
};

function expectedWords(expected: string): string {
  return EXPECTED[expected] ?? expected;
}

function quoteList(values: readonly unknown[]): string {
  return values.map((value) => JSON.stringify(value)).join(", ");
}

/** Keys a strict object accepts, read from the schema instance zod hands to the error map. */
function knownKeys(inst: unknown): string[] {
  const shape = (inst as { _zod?: { def?: { shape?: Record<string, unknown> } } } | undefined)?._zod?.def?.shape;
  return shape ? Object.keys(shape) : [];
}

function unknownValueMessage(input: unknown, values: readonly unknown[]): string {
  const strings = values.filter((value): value is string => typeof value === "string");
  if (typeof input === "string" && strings.length > 0 && strings.every((value) => (FORMAT_NAMES as readonly string[]).includes(value))) {
    // specs take the canonical names alone (specs/README.md): every alias, even one the command line accepts, is a hint
    const hint = didYouMeanFormat(input, strings);
    return `unknown format ${JSON.stringify(input)}${hint}; expected one of ${quoteList(strings)}`;
  }
  if (typeof input === "string" && strings.length === BARE_LAYER_TYPES.length && strings.every((v) => (BARE_LAYER_TYPES as readonly string[]).includes(v))) {
    if ((LAYER_TYPES as readonly string[]).includes(input)) {
      return `a ${input} layer needs parameters: write it as a mapping, e.g. { type: ${input}, ... }`;
    }
    return `unknown layer type ${JSON.stringify(input)}${didYouMean(input, LAYER_TYPES)}`;
  }
  const hint = typeof input === "string" ? didYouMean(input, strings) : "";
  if (hint !== "" && values.length > 6) return `unknown value ${JSON.stringify(input)}${hint}`;
  return `expected one of ${quoteList(values)}, got ${describeValue(input)}${hint}`;
}

/**
 * The error map handed to zod: our message for each kind of issue.
 * Unknown keys are one issue per object in zod; the message carries one line per key (split later).
 */
export const errorMap: z.core.$ZodErrorMap = (issue) => {
  const input = issue.input;
  switch (issue.code) {
    case "invalid_type": {
      if (input === undefined) return "missing key";
      if (typeof input === "number" && !Number.isFinite(input) && (issue.expected === "number" || issue.expected === "int")) {
        return `expected a finite number, got ${describeValue(input)}`;
      }
      return `expected ${expectedWords(issue.expected)}, got ${describeValue(input)}${numberHint(input, issue.expected)}`;
    }
    case "too_small": {
      const minimum = Number(issue.minimum);
      if (issue.origin === "array" || issue.origin === "set") {
        return minimum <= 1 ? "must not be empty" : `must have at least ${minimum} items, got ${Array.isArray(input) ? input.length : 0}`;
      }
      if (issue.origin === "string") return "must not be empty";
      if (PLAUSIBLE_MINIMA.has(minimum) && issue.inclusive) {
        // zero and negative values are impossible, not implausible
        if (typeof input === "number" && input <= 0) return `must be greater than 0, got ${describeValue(input)}`;
        return `beyond any real network: at least ${boundText(minimum)}, got ${describeValue(input)}; check the value`;
      }
      const bound = issue.inclusive ? `at least ${minimum}` : `greater than ${minimum}`;
      return `must be ${bound}, got ${describeValue(input)}`;
    }
    case "too_big": {
      const maximum = Number(issue.maximum);
      if (issue.origin === "array" || issue.origin === "set") {
        return `must have at most ${maximum} items, got ${Array.isArray(input) ? input.length : "more"}`;
      }
      if (PLAUSIBLE_MAXIMA.has(maximum) && issue.inclusive) {
        return `beyond any real network: at most ${maximum === MAX_SIZE ? maximum : boundText(maximum)}, got ${describeValue(input)}; check the value`;
      }
      const bound = issue.inclusive ? `at most ${maximum}` : `below ${maximum}`;
      return `must be ${bound}, got ${describeValue(input)}`;
    }
    case "invalid_value":
      return unknownValueMessage(input, issue.values);
    case "invalid_format":
      if (issue.format === "regex") {
        return `invalid name ${JSON.stringify(input)}: use ASCII letters (a-z, A-Z), digits, "-" and "_", not starting with "-"`;
      }
      return `invalid ${issue.format}: ${describeValue(input)}`;
    case "unrecognized_keys": {
      const keys = knownKeys(issue.inst);
      const listing = keys.length > 0 && keys.length <= 14 ? `; expected one of: ${keys.join(", ")}` : "";
      return issue.keys
        .map((key) => {
          const hint = didYouMean(key, keys);
          return `unknown key ${JSON.stringify(key)}${hint === "" ? listing : hint}`;
        })
        .join("\n");
    }
    case "invalid_union": {
      if (issue.discriminator !== undefined) {
        const options = ((issue.options ?? []) as unknown[]).map(String);
        const given = typeof input === "object" && input !== null ? (input as Record<string, unknown>)[issue.discriminator] : undefined;
        if (given === undefined) return `missing key "${issue.discriminator}"; expected one of ${quoteList(options)}`;
        if (typeof given !== "string") return `expected a string, got ${describeValue(given)}`;
        const listing = options.length <= 12 ? `; expected one of ${quoteList(options)}` : "";
        const hint = didYouMean(given, options);
        const what = issue.discriminator === "type" ? "layer type" : issue.discriminator;
        return `unknown ${what} ${JSON.stringify(given)}${hint === "" ? listing : hint}`;
      }
      // every branch refused the value's kind: say which kinds fit
      const expected = new Set<string>();
      for (const branch of issue.errors) {
        for (const sub of branch) {
          if (sub.path.length !== 0) continue;
          if (sub.code === "invalid_type") expected.add(expectedWords(sub.expected));
          else if (sub.code === "invalid_value") expected.add(sub.values.length === 1 ? JSON.stringify(sub.values[0]) : "a name");
          else if (sub.code === "invalid_union") expected.add("a mapping");
        }
      }
      return `expected ${[...expected].join(" or ")}, got ${describeValue(input)}`;
    }
    case "custom":
      return issue.message ?? "invalid value";
    default:
      return undefined;
  }
};

/** A branch of a union fails on the kind of the value (a string where a mapping is needed), not on its content. */
function isKindMismatch(branch: readonly z.core.$ZodIssue[], input: unknown): boolean {
  return branch.some((sub) => {
    if (sub.path.length !== 0) return false;
    // a number that is not finite fails on its value, not its kind
    if (sub.code === "invalid_type") return !(typeof sub.input === "number" && (sub.expected === "number" || sub.expected === "int"));
    if (sub.code === "invalid_value") return sub.values.every((value) => typeof value !== typeof input);
    return false;
  });
}

function branchWeight(branch: readonly z.core.$ZodIssue[]): number {
  let weight = 0;
  for (const sub of branch) weight += sub.code === "unrecognized_keys" ? sub.keys.length : 1;
  return weight;
}

function isBound(issue: z.core.$ZodIssue): boolean {
  return issue.code === "too_big" || issue.code === "too_small";
}

/**
 * zod's own bound on every integer (±(2^53 − 1), the safe integers of IEEE 754 binary64): each integer key of the
 * spec has a tighter bound of its own, which a value beyond 2^53 crosses too and which is the one to tell.
 */
function isSafeIntegerBound(issue: z.core.$ZodIssue): boolean {
  if (issue.code === "too_big") return Number(issue.maximum) === Number.MAX_SAFE_INTEGER;
  if (issue.code === "too_small") return Number(issue.minimum) === Number.MIN_SAFE_INTEGER;
  return false;
}

function samePath(a: readonly PropertyKey[], b: readonly PropertyKey[]): boolean {
  return a.length === b.length && a.every((segment, index) => segment === b[index]);
}

/** zod's issues (already given our messages by `errorMap`) as one issue per problem, with full paths. */
export function flattenIssues(issues: readonly z.core.$ZodIssue[], prefix: (string | number)[] = []): RawIssue[] {
  const out: RawIssue[] = [];
  for (const issue of issues) {
    if (isSafeIntegerBound(issue) && issues.some((other) => other !== issue && isBound(other) && samePath(other.path, issue.path))) continue;
    const path = [...prefix, ...issue.path.map((segment) => (typeof segment === "number" ? segment : String(segment)))];
    if (issue.message.startsWith(FINAL_MESSAGE)) {
      out.push({ path, atKey: false, message: issue.message.slice(FINAL_MESSAGE.length) });
      continue;
    }
    if (issue.code === "invalid_union" && issue.errors.length > 0) {
      const candidates = issue.errors.filter((branch) => !isKindMismatch(branch, issue.input));
      if (candidates.length > 0) {
        let best = candidates[0]!;
        for (const branch of candidates) if (branchWeight(branch) < branchWeight(best)) best = branch;
        out.push(...flattenIssues(best, path));
        continue;
      }
    }
    if (issue.code === "unrecognized_keys") {
      const lines = issue.message.split("\n");
      issue.keys.forEach((key, index) => {
        out.push({ path: [...path, key], atKey: true, message: lines[index] ?? `unknown key ${JSON.stringify(key)}` });
      });
      continue;
    }
    let message = issue.message;
    if (message === "missing key") {
      const last = path[path.length - 1];
      message = typeof last === "string" ? `missing key ${JSON.stringify(last)}` : "missing value";
    }
    out.push({ path, atKey: false, message });
  }
  return prefix.length === 0 ? dropMissingExplainedByTypos(out) : out;
}

/** A required key reported missing next to an unknown key that is its misspelling: the typo says it all. */
function dropMissingExplainedByTypos(issues: RawIssue[]): RawIssue[] {
  const parent = (path: readonly (string | number)[]) => JSON.stringify(path.slice(0, -1));
  const typos = new Set<string>();
  for (const issue of issues) {
    const meant = /^unknown key "[^"]*" \(did you mean "([^"]+)"\?\)$/.exec(issue.message)?.[1];
    if (meant !== undefined) typos.add(`${parent(issue.path)}|${meant}`);
  }
  return issues.filter((issue) => {
    const missing = /^missing key "([^"]+)"$/.exec(issue.message)?.[1];
    return missing === undefined || !typos.has(`${parent(issue.path)}|${missing}`);
  });
}
