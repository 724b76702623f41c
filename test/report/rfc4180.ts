/**
 * A strict CSV reader written from RFC 4180 §2 (the ABNF grammar), kept apart from src/report/csv.ts
 * so tests of the writer check it against the RFC's grammar, not against itself.
 * Strict: records end with CRLF; a quote inside an unquoted field, text after a closing quote,
 * an unterminated quoted field and records of unequal length are errors.
 */
export function parseRfc4180(text: string): string[][] {
  const records: string[][] = [];
  let record: string[] = [];
  let i = 0;
  const n = text.length;
  if (n === 0) return records;
  for (;;) {
    // field = (escaped / non-escaped)
    let field = "";
    if (text[i] === '"') {
      i += 1;
      for (;;) {
        if (i >= n) throw new SyntaxError("unterminated quoted field");
        const c = text[i]!;
        if (c === '"') {
          if (text[i + 1] === '"') {
            field += '"';
            i += 2;
          } else {
            i += 1;
            break;
          }
        } else {
          field += c;
          i += 1;
        }
      }
    } else {
      while (i < n && text[i] !== "," && text[i] !== "\r" && text[i] !== "\n") {
        if (text[i] === '"') throw new SyntaxError(`quote inside an unquoted field at offset ${i}`);
        field += text[i];
        i += 1;
      }
    }
    record.push(field);
    if (i >= n) {
      records.push(record);
      break;
    }
    if (text[i] === ",") {
      i += 1;
      continue;
    }
    if (text[i] === "\r" && text[i + 1] === "\n") {
      i += 2;
      records.push(record);
      record = [];
      if (i >= n) break; // the last record may end with CRLF (§2 rule 2)
      continue;
    }
    throw new SyntaxError(`expected a comma or CRLF at offset ${i}, found ${JSON.stringify(text[i])}`);
  }
  const width = records[0]?.length ?? 0;
  records.forEach((r, index) => {
    // §2 rule 4: each line should contain the same number of fields
    if (r.length !== width) throw new SyntaxError(`record ${index} has ${r.length} fields, the first has ${width}`);
  });
  return records;
}
