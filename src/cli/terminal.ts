import { colorEnabled, createStyle, type Style } from "../report/style.js";

/**
 * The width text reports wrap at: the terminal's, kept within 80 to 140 columns so sentences stay readable on narrow
 * and very wide terminals; 100 when stdout is not a terminal (a file, a pipe). Common practice for line length.
 */
export function textWidth(): number {
  return Math.max(80, Math.min(140, process.stdout.columns ?? 100));
}

/** The style of text written to stdout: colour when stdout takes it (report/style.ts: a terminal, NO_COLOR, FORCE_COLOR). */
export function stdoutStyle(): Style {
  return createStyle(colorEnabled(process.stdout, process.env));
}
