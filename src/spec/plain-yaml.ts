/**
 * A fast reader for the plain YAML that specs are written in: block mappings and sequences, one-line
 * flow collections, plain and one-line quoted scalars, comments. It gives the same value as the yaml
 * library's parseDocument(...).toJS() under the YAML 1.2 core schema, several times faster and without
 * positions; for anything else (anchors, aliases, tags, block and multi-line scalars, escapes, merge
 * keys, quoted or repeated keys, tabs, CR line ends, odd indentation, any error) it gives undefined and
 * the caller parses the text with the yaml library, which also positions every problem.
 */

// tabs, CR, backslashes (escapes), characters YAML does not allow or JavaScript trims as spaces; document markers
const REFUSED = /[\x00-\x09\x0b-\x1f\x7f-\x9f\ud800-\udfff\u2028\u2029\ufeff\ufffe\uffff\\]|^(?:---|\.\.\.|%)/m;

// YAML's white space here is the space alone (tabs are refused), not JavaScript's wider set; loops, not
// regular expressions: they run twice a line
function trimStart(text: string): string {
  let start = 0;
  while (text.charCodeAt(start) === 32) start++;
  return start === 0 ? text : text.slice(start);
}

function trimEnd(text: string): string {
  let end = text.length;
  while (end > 0 && text.charCodeAt(end - 1) === 32) end--;
  return end === text.length ? text : text.slice(0, end);
}

/** Thrown inside the reader when the text leaves the plain subset; never escapes it. */
class NotPlain extends Error {}

const notPlain = (): never => {
  throw new NotPlain();
};

// keys the reader takes as they are: a plain word that the core schema reads as a string
const KEY = /^[A-Za-z_$][A-Za-z0-9_.-]*$/;
const NON_STRING_KEY = /^(?:[Nn]ull|NULL|[Tt]rue|TRUE|[Ff]alse|FALSE|__proto__)$/;

/** A key the reader takes, not yet in `map`. */
function newKey(map: Record<string, unknown>, key: string): string {
  if (!KEY.test(key) || NON_STRING_KEY.test(key) || Object.hasOwn(map, key)) notPlain();
  return key;
}

// the YAML 1.2 core schema's plain scalars, tried in the yaml library's order (yaml/dist/schema/core)
const NULL = /^(?:~|[Nn]ull|NULL)?$/;
const BOOL = /^(?:[Tt]rue|TRUE|[Ff]alse|FALSE)$/;
const INT_OCT = /^0o[0-7]+$/;
const INT = /^[-+]?[0-9]+$/;
const INT_HEX = /^0x[0-9a-fA-F]+$/;
const FLOAT_NAN = /^(?:[-+]?\.(?:inf|Inf|INF)|\.nan|\.NaN|\.NAN)$/;
const FLOAT_EXP = /^[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)[eE][-+]?[0-9]+$/;
const FLOAT = /^[-+]?(?:\.[0-9]+|[0-9]+\.[0-9]*)$/;

/** A plain scalar's value under the core schema. */
function resolvePlain(text: string): unknown {
  if (NULL.test(text)) return null;
  if (BOOL.test(text)) return text[0] === "t" || text[0] === "T";
  if (INT_OCT.test(text)) return parseInt(text.slice(2), 8);
  if (INT.test(text)) return parseInt(text, 10);
  if (INT_HEX.test(text)) return parseInt(text.slice(2), 16);
  if (FLOAT_NAN.test(text)) return text.slice(-3).toLowerCase() === "nan" ? NaN : text[0] === "-" ? -Infinity : Infinity;
  if (FLOAT_EXP.test(text) || FLOAT.test(text)) return parseFloat(text);
  return text;
}

// a plain scalar may not start with an indicator (YAML 1.2 §7.3.3); "-" may, before a digit or a dot
const INDICATOR = /^[-?:,[\]{}#&*!|>'"%@`]/;
const SIGNED = /^-[0-9.]/;

/** A plain scalar of block context (the rest of a line, comment removed). */
function blockPlain(text: string): unknown {
  if (INDICATOR.test(text) && !SIGNED.test(text)) notPlain();
  if (text.includes(": ") || text.endsWith(":")) notPlain();
  return resolvePlain(text);
}

/** Cut a trailing comment (a # after a space) and trailing spaces. */
function uncomment(text: string): string {
  const at = text.indexOf(" #");
  return trimEnd(at >= 0 ? text.slice(0, at) : text);
}

/** A one-line quoted scalar at the start of `text`; returns its value and the text after it. */
function quoted(text: string): [string, string] {
  const quote = text[0]!;
  if (quote === '"') {
    const end = text.indexOf('"', 1);
    if (end < 0) notPlain();
    const value = text.slice(1, end);
    if (value.includes("\\")) notPlain();
    return [value, text.slice(end + 1)];
  }
  let value = "";
  let at = 1;
  for (;;) {
    const end = text.indexOf("'", at);
    if (end < 0) notPlain();
    value += text.slice(at, end);
    if (text[end + 1] !== "'") return [value, text.slice(end + 1)];
    value += "'";
    at = end + 2;
  }
}

/** What may follow a value on its line: nothing, or a comment. */
function endOfLine(rest: string): void {
  const trimmed = trimStart(rest);
  if (trimmed !== "" && (trimmed[0] !== "#" || trimmed.length === rest.length)) notPlain();
}

/** A flow collection that opens and closes on one line. */
class FlowReader {
  at = 0;
  constructor(readonly text: string) {}

  private spaces(): void {
    while (this.text[this.at] === " ") this.at++;
  }

  value(): unknown {
    this.spaces();
    const c = this.text[this.at];
    if (c === "[") return this.sequence();
    if (c === "{") return this.mapping();
    if (c === '"' || c === "'") {
      const [value, rest] = quoted(this.text.slice(this.at));
      this.at = this.text.length - rest.length;
      return value;
    }
    const start = this.at;
    while (this.at < this.text.length && !",[]{}#:".includes(this.text[this.at]!)) this.at++;
    const plain = trimEnd(this.text.slice(start, this.at));
    if (plain === "" || (INDICATOR.test(plain) && !SIGNED.test(plain))) notPlain();
    return resolvePlain(plain);
  }

  /** The entries of a collection up to `close`, separated by commas (no trailing comma). */
  private entries(close: string, entry: () => void): void {
    this.at++;
    this.spaces();
    if (this.text[this.at] === close) {
      this.at++;
      return;
    }
    for (;;) {
      entry();
      this.spaces();
      const c = this.text[this.at++];
      if (c === close) return;
      if (c !== ",") notPlain();
      this.spaces();
      if (this.text[this.at] === close) notPlain();
    }
  }

  private sequence(): unknown[] {
    const out: unknown[] = [];
    this.entries("]", () => out.push(this.value()));
    return out;
  }

  private mapping(): Record<string, unknown> {
    const out: Record<string, unknown> = {};
    this.entries("}", () => {
      const start = this.at;
      while (this.at < this.text.length && !",[]{}#: ".includes(this.text[this.at]!)) this.at++;
      const key = newKey(out, this.text.slice(start, this.at));
      if (this.text[this.at] !== ":" || this.text[this.at + 1] !== " ") notPlain();
      this.at += 2;
      out[key] = this.value();
    });
    return out;
  }
}

/** A value written on the rest of a line: a flow collection, a quoted scalar or a plain scalar. */
function inlineValue(text: string): unknown {
  const c = text[0];
  if (c === "[" || c === "{") {
    const reader = new FlowReader(text);
    const value = reader.value();
    endOfLine(text.slice(reader.at));
    return value;
  }
  if (c === '"' || c === "'") {
    const [value, rest] = quoted(text);
    endOfLine(rest);
    return value;
  }
  return blockPlain(uncomment(text));
}

interface Line {
  indent: number;
  /** the line from its first non-space character */
  text: string;
}

const MAP_ENTRY = /^([^\s:#'"[\]{},]+):(?: +(.*))?$/;

function isItem(text: string): boolean {
  return text === "-" || text.startsWith("- ");
}

/** The block structure over the content lines. */
class BlockReader {
  at = 0;
  constructor(readonly lines: Line[]) {}

  /** The node whose first line is the current one, at its indentation. */
  node(): unknown {
    const line = this.lines[this.at]!;
    if (isItem(line.text)) return this.sequence(line.indent);
    if (MAP_ENTRY.test(line.text)) return this.mapping(line.indent);
    return notPlain();
  }

  /** The value after `key:` or `-` with nothing after it on the line: a nested block, or null. */
  private nested(indent: number, sequenceMayAlign: boolean): unknown {
    const next = this.lines[this.at];
    if (next === undefined || next.indent < indent) return null;
    if (next.indent > indent) return this.node();
    // a mapping's value may be a sequence at the mapping's own indentation
    return sequenceMayAlign && isItem(next.text) ? this.sequence(indent) : null;
  }

  /** After a value on the same line, the next line may not be deeper (a continued scalar, or an error). */
  private noDeeper(indent: number): void {
    const next = this.lines[this.at];
    if (next !== undefined && next.indent > indent) notPlain();
  }

  private mapping(indent: number): Record<string, unknown> {
    const out: Record<string, unknown> = {};
    for (let line = this.lines[this.at]; line !== undefined && line.indent >= indent; line = this.lines[this.at]) {
      if (line.indent > indent || isItem(line.text)) notPlain();
      const entry = MAP_ENTRY.exec(line.text) ?? notPlain();
      const key = newKey(out, entry[1]!);
      const rest = entry[2] ?? "";
      this.at++;
      if (rest === "" || rest[0] === "#") out[key] = this.nested(indent, true);
      else {
        out[key] = inlineValue(rest);
        this.noDeeper(indent);
      }
    }
    return out;
  }

  private sequence(indent: number): unknown[] {
    const out: unknown[] = [];
    for (let line = this.lines[this.at]; line !== undefined && line.indent >= indent; line = this.lines[this.at]) {
      if (line.indent > indent) notPlain();
      if (!isItem(line.text)) break;
      const after = line.text.slice(1);
      const rest = trimStart(after);
      if (rest === "" || rest[0] === "#") {
        this.at++;
        out.push(this.nested(indent, false));
      } else if (isItem(rest)) {
        notPlain();
      } else if (MAP_ENTRY.test(rest) && rest[0] !== "{") {
        // "- key: value": a mapping whose keys line up with this first one
        this.lines[this.at] = { indent: indent + 1 + after.length - rest.length, text: rest };
        out.push(this.node());
      } else {
        this.at++;
        out.push(inlineValue(rest));
        this.noDeeper(indent);
      }
    }
    return out;
  }
}

/**
 * The value of a YAML document written in the plain subset (see the module comment), equal to what the
 * yaml library gives; undefined for any other text, including every text the library would refuse.
 * @example readPlainYaml("a: 1\nb: [x, 2.5]\n") // => { a: 1, b: ["x", 2.5] }
 */
export function readPlainYaml(text: string): unknown {
  if (REFUSED.test(text)) return undefined;
  const lines: Line[] = [];
  for (const raw of text.split("\n")) {
    const body = trimStart(raw);
    if (body === "" || body[0] === "#") continue;
    lines.push({ indent: raw.length - body.length, text: trimEnd(body) });
  }
  if (lines.length === 0 || lines[0]!.indent !== 0) return undefined;
  try {
    const reader = new BlockReader(lines);
    const value = reader.node();
    return reader.at === lines.length ? value : undefined;
  } catch {
    // NotPlain, or a stack overflow on absurd nesting: the yaml library decides
    return undefined;
  }
}
