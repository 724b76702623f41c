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

/** A control character as its escape: `\n`, `\t` as JSON writes them, any other as `\u001b` (JSON leaves C1 and DEL raw). */
export function controlEscape(c: string): string {
  const json = JSON.stringify(c).slice(1, -1);
  return json !== c ? json : `\\u${c.charCodeAt(0).toString(16).padStart(4, "0")}`;
}

/**
 * Escape plain text so GitHub Markdown shows it literally, inside a table cell or a paragraph:
 * punctuation gets a backslash (CommonMark §2.4), `& < >` become entities (so no raw HTML),
 * line breaks become `<br>` (a table row must stay on one line), other control characters their JSON escapes.
 *
 * @example escapeMarkdown("a|b <i>") // => "a\\|b &lt;i&gt;"
 */
export function escapeMarkdown(text: string): string {
  return (
    text
      // other control characters than line breaks (a file name may hold ESC) shown as their JSON escape (\u001b): Markdown
      // printed to a terminal must not carry an escape sequence (ECMA-48 §5.3); the backslash is escaped below
      .replace(/[\u0000-\u0009\u000b\u000c\u000e-\u001f\u007f-\u009f]/g, controlEscape)
      .replaceAll("&", "&amp;")
      .replaceAll("<", "&lt;")
      .replaceAll(">", "&gt;")
      .replace(MARKDOWN_PUNCTUATION, (c) => "\\" + c)
      .replace(/\r\n|\r|\n/g, "<br>")
  );
}

/** A titled bullet list of plain-text lines, after a blank line; "" when there are none. */
export function markdownList(title: string, lines: readonly string[]): string {
  if (lines.length === 0) return "";
  return `\n${title}:\n\n` + lines.map((line) => `- ${escapeMarkdown(line)}\n`).join("");
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
