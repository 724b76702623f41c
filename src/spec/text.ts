/** The bytes of a spec file as text: UTF-8 (YAML 1.2.2 §5.2 also allows UTF-16 and UTF-32; specs are UTF-8 alone). */
import type { SpecIssue } from "./issues.js";

/** What decoding a spec file gives: its text (without a byte-order mark), or where it stops being UTF-8 text. */
export type SpecText = { ok: true; text: string } | { ok: false; issue: SpecIssue };

const fatal = new TextDecoder("utf-8", { fatal: true, ignoreBOM: true });
const lenient = new TextDecoder("utf-8", { fatal: false, ignoreBOM: true });

function issueAt(file: string, text: string, index: number, message: string): { ok: false; issue: SpecIssue } {
  const lineStart = text.lastIndexOf("\n", index - 1) + 1;
  let line = 1;
  for (let at = text.indexOf("\n"); at >= 0 && at < index; at = text.indexOf("\n", at + 1)) line += 1;
  return { ok: false, issue: { file, line, column: index - lineStart + 1, path: "", message } };
}

/**
 * Decode a spec file's bytes as UTF-8, dropping a byte-order mark. A UTF-16 or UTF-32 file, a byte sequence that is not
 * UTF-8, or a NUL character (which YAML does not allow, and which UTF-16 text holds in every ASCII character) is an issue
 * at its line and column, where the decoder replacing it with U+FFFD would have let the spec pass with mangled names.
 * @example decodeSpecBytes(new TextEncoder().encode("name: tide"), "a.yaml") // => { ok: true, text: "name: tide" }
 */
export function decodeSpecBytes(bytes: Uint8Array, file: string): SpecText {
  const starts = (...prefix: number[]) => prefix.every((byte, index) => bytes[index] === byte);
  if (starts(0xff, 0xfe) || starts(0xfe, 0xff) || starts(0x00, 0x00, 0xfe, 0xff)) {
    const width = starts(0xff, 0xfe, 0x00, 0x00) || starts(0x00, 0x00, 0xfe, 0xff) ? "UTF-32" : "UTF-16";
    return { ok: false, issue: { file, line: 1, column: 1, path: "", message: `the file is ${width} text (it starts with a ${width} byte-order mark); save it as UTF-8` } };
  }
  const bom = starts(0xef, 0xbb, 0xbf) ? 3 : 0;
  const body = bytes.subarray(bom);
  let text: string;
  try {
    text = fatal.decode(body);
  } catch {
    // find the first sequence the decoder replaced: a U+FFFD that was not written as its own three bytes
    const mangled = lenient.decode(body);
    const encoder = new TextEncoder();
    let offset = 0;
    let previous = 0;
    for (let index = mangled.indexOf("\ufffd"); index >= 0; index = mangled.indexOf("\ufffd", index + 1)) {
      offset += encoder.encode(mangled.slice(previous, index)).length;
      previous = index;
      if (!(body[offset] === 0xef && body[offset + 1] === 0xbf && body[offset + 2] === 0xbd)) {
        const byte = (body[offset] ?? 0).toString(16).padStart(2, "0");
        return issueAt(file, mangled, index, `the file is not UTF-8 text: byte 0x${byte} here is not valid UTF-8; save the file as UTF-8`);
      }
    }
    return issueAt(file, mangled, 0, "the file is not UTF-8 text; save it as UTF-8");
  }
  const nul = text.indexOf("\u0000");
  if (nul >= 0) return issueAt(file, text, nul, "the file holds a NUL character, which YAML does not allow (is it UTF-16 text?); save it as UTF-8");
  return { ok: true, text };
}
