/**
 * GitHub-flavoured Markdown pieces for CI comments: escaped inline text and pipe tables.
 * Names come from user specs, so every cell is escaped: it renders as the literal text, never as markup.
 */

/** A Markdown table cell: plain text (escaped), a number, or `{ markdown }` already written as Markdown. */
export type MarkdownCell = string | number | null | undefined | { readonly markdown: string };

/** A column of a Markdown table. */
export interface MarkdownColumn {
  title: string;
  /** default "left" */
  align?: "left" | "right" | "center";
}

// ASCII punctuation that could start emphasis, code, links, headings, lists or tables; "(" and "!"
// need no escape once "[" and "]" have one (a link or image needs both).
const MARKDOWN_PUNCTUATION = /[\\`*_[\]#+|~]/g;

/**
 * Escape plain text so GitHub Markdown shows it literally, inside a table cell or a paragraph:
 * punctuation gets a backslash (CommonMark §2.4), `& < >` become entities (so no raw HTML),
 * line breaks become `<br>` (a table row must stay on one line).
 *
 * @example escapeMarkdown("a|b <i>") // => "a\\|b &lt;i&gt;"
 */
export function escapeMarkdown(text: string): string {
  return text
    .replaceAll("&", "&amp;")
    .replaceAll("<", "&lt;")
    .replaceAll(">", "&gt;")
    .replace(MARKDOWN_PUNCTUATION, (c) => "\\" + c)
    .replace(/\r\n|\r|\n/g, "<br>");
}

/** Inline code for plain text; a backtick inside is shown as itself (longer fence, CommonMark §6.1). */
export function markdownCode(text: string): string {
  const flat = text.replace(/\r\n|\r|\n/g, " ").replaceAll("|", "\\|");
  const longest = Math.max(0, ...[...flat.matchAll(/`+/g)].map((m) => m[0].length));
  const fence = "`".repeat(longest + 1);
  const space = flat.startsWith("`") || flat.endsWith("`") ? " " : "";
  return fence + space + flat + space + fence;
}

function cellMarkdown(cell: MarkdownCell): string {
  if (cell === null || cell === undefined) return "";
  if (typeof cell === "number") return escapeMarkdown(String(cell));
  if (typeof cell === "string") return escapeMarkdown(cell);
  return cell.markdown.replace(/\r\n|\r|\n/g, "<br>");
}

const DELIMITER = { left: "---", right: "---:", center: ":---:" } as const;

/**
 * A GitHub pipe table. Every line ends with "\n". Rows longer than the columns are a RangeError;
 * shorter rows get empty cells.
 *
 * @example markdownTable([{ title: "spec" }], [["a|b"]]) // => "| spec |\n| --- |\n| a\\|b |\n"
 */
export function markdownTable(columns: readonly MarkdownColumn[], rows: readonly (readonly MarkdownCell[])[]): string {
  const line = (cells: readonly string[]): string => `| ${cells.join(" | ")} |\n`;
  let out = line(columns.map((column) => escapeMarkdown(column.title)));
  out += line(columns.map((column) => DELIMITER[column.align ?? "left"]));
  rows.forEach((row, index) => {
    if (row.length > columns.length) {
      throw new RangeError(`row ${index} has ${row.length} cells; the table has ${columns.length} columns`);
    }
    out += line(columns.map((_, c) => cellMarkdown(row[c])));
  });
  return out;
}
