/**
 * A progress bar on stderr, drawn only when stderr is a terminal: stdout stays for data, and logs
 * of CI jobs and pipes get no carriage-return noise.
 */

/** The part of a stream the bar needs. */
export interface ProgressStream {
  isTTY?: boolean | undefined;
  columns?: number | undefined;
  write(chunk: string): unknown;
}

/** Options of {@link createProgress}. */
export interface ProgressOptions {
  /** how many items there are */
  total: number;
  /** a word or two before the bar, e.g. "checking" */
  label?: string;
  /** default process.stderr */
  stream?: ProgressStream;
  /** default: the stream's TTY flag */
  enabled?: boolean;
  /** milliseconds clock; injected by tests */
  now?: () => number;
  /** minimum milliseconds between two redraws (default 100) */
  interval?: number;
}

/** A running progress bar. */
export interface Progress {
  /** mark `count` more items done (default 1) */
  tick(count?: number): void;
  /** erase the bar; call once at the end, also after a failure */
  finish(): void;
}

const CLEAR_LINE = "\r\x1b[2K";

/** The bar's text for `done` of `total` within `width` columns (pure, for tests). */
export function progressLine(label: string, done: number, total: number, width: number): string {
  const share = total > 0 ? Math.min(1, done / total) : 1;
  const percent = `${Math.floor(share * 100)}%`.padStart(4);
  const counts = `${done}/${total}`;
  const fixed = `${label ? label + " " : ""} ${counts} ${percent}`;
  const barWidth = Math.max(0, Math.min(40, width - fixed.length - 3));
  if (barWidth < 5) return `${label ? label + " " : ""}${counts} ${percent}`.slice(0, Math.max(0, width - 1));
  const filled = Math.round(share * barWidth);
  return `${label ? label + " " : ""}[${"=".repeat(filled)}${" ".repeat(barWidth - filled)}] ${counts} ${percent}`;
}

/**
 * Start a progress bar. When disabled (stderr is not a terminal) every method does nothing, so
 * callers need no branches of their own.
 */
export function createProgress(options: ProgressOptions): Progress {
  const stream = options.stream ?? process.stderr;
  const enabled = options.enabled ?? stream.isTTY === true;
  if (!enabled) return { tick: () => {}, finish: () => {} };
  const now = options.now ?? (() => performance.now());
  const interval = options.interval ?? 100;
  const label = options.label ?? "";
  let done = 0;
  let lastDraw = -Infinity;
  let drawn = false;
  let finished = false;
  const draw = (): void => {
    stream.write(CLEAR_LINE + progressLine(label, done, options.total, stream.columns ?? 80));
    drawn = true;
    lastDraw = now();
  };
  draw();
  return {
    tick(count = 1) {
      if (finished) return;
      done += count;
      if (now() - lastDraw >= interval) draw();
    },
    finish() {
      if (finished) return;
      finished = true;
      if (drawn) stream.write(CLEAR_LINE);
    },
  };
}
