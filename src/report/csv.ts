/**
 * CSV as RFC 4180 defines it: records end with CRLF, a field holding a comma, a double quote, CR or LF
 * is enclosed in double quotes, and a double quote inside it is doubled (RFC 4180 §2, rules 1, 6 and 7).
 */

/** One CSV field: text, a number or a boolean; `null`/`undefined` give an empty field. */
export type CsvField = string | number | boolean | null | undefined;

const NEEDS_QUOTES = /[",\r\n]/;

/**
 * One field, quoted only when RFC 4180 requires it.
 * @example csvField('say "hi", twice') // => '"say ""hi"", twice"'
 */
export function csvField(value: CsvField): string {
  if (value === null || value === undefined) return "";
  const text = typeof value === "string" ? value : String(value);
  return NEEDS_QUOTES.test(text) ? `"${text.replaceAll('"', '""')}"` : text;
}

/** One record: fields joined by commas, ended by CRLF (RFC 4180 §2 rule 1). */
export function csvRecord(fields: readonly CsvField[]): string {
  return fields.map(csvField).join(",") + "\r\n";
}

/**
 * A whole CSV document: a header record, then one record per row. Every row must have as many
 * fields as the header (RFC 4180 §2 rule 4); a row of another length is a RangeError.
 */
export function renderCsv(header: readonly string[], rows: readonly (readonly CsvField[])[]): string {
  let out = csvRecord(header);
  rows.forEach((row, index) => {
    if (row.length !== header.length) {
      throw new RangeError(`row ${index} has ${row.length} fields; the header has ${header.length}`);
    }
    out += csvRecord(row);
  });
  return out;
}
