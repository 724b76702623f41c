/**
 * Terminal colour, decided once per output stream and passed down explicitly, so renderers stay pure
 * and their output does not depend on where the test or CI job happens to run.
 */
import { styleText } from "node:util";

/** A text format `util.styleText` knows: a colour or a modifier such as "bold". */
export type StyleFormat = Exclude<Parameters<typeof styleText>[0], readonly unknown[]>;

/** The meanings headroom colours; renderers ask for a meaning, never for a colour. */
export type StyleRole = "fits" | "risk" | "fails" | "error" | "muted" | "strong" | "heading" | "number";

/** Our palette: which formats each meaning gets. */
const ROLE_FORMATS = {
  fits: ["green"],
  risk: ["yellow"],
  fails: ["red", "bold"],
  error: ["magenta", "bold"],
  muted: ["dim"],
  strong: ["bold"],
  heading: ["bold", "underline"],
  number: ["cyan"],
} as const satisfies Record<StyleRole, readonly StyleFormat[]>;

/** What {@link colorEnabled} looks at: a stream's TTY flag and the environment. */
export interface ColorContext {
  isTTY?: boolean | undefined;
}

/**
 * Whether to colour output written to `stream`: on when FORCE_COLOR is set (to anything but "0" or
 * "false"); off when FORCE_COLOR is "0"/"false"; otherwise on only when the stream is a terminal and
 * NO_COLOR is unset or empty (the NO_COLOR and FORCE_COLOR conventions, common practice).
 */
export function colorEnabled(stream: ColorContext, env: Readonly<Record<string, string | undefined>>): boolean {
  const force = env["FORCE_COLOR"];
  if (force !== undefined) return force !== "0" && force.toLowerCase() !== "false";
  const noColor = env["NO_COLOR"];
  if (noColor !== undefined && noColor !== "") return false;
  return stream.isTTY === true;
}

/** Paints text for one output; a plain style returns text unchanged. */
export interface Style {
  readonly enabled: boolean;
  /** paint by meaning */
  role(role: StyleRole, text: string): string;
  /** paint with explicit formats (for the rare case no role fits) */
  paint(format: StyleFormat | readonly StyleFormat[], text: string): string;
}

/**
 * A style with the colour decision made by the caller (see {@link colorEnabled}).
 * @example createStyle(false).role("fails", "fails") // => "fails"
 */
export function createStyle(enabled: boolean): Style {
  const paint = (format: StyleFormat | readonly StyleFormat[], text: string): string => {
    if (!enabled || text === "") return text;
    const formats = typeof format === "string" ? [format] : [...format];
    // the decision is ours: styleText must not veto it by looking at process.stdout
    return styleText(formats, text, { validateStream: false });
  };
  return {
    enabled,
    paint,
    role: (role, text) => paint(ROLE_FORMATS[role], text),
  };
}

/** A style that never colours; the default for renderers. */
export const PLAIN: Style = createStyle(false);
