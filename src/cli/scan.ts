import { stat } from "node:fs/promises";
import type { OverflowMode } from "../formats/index.js";
import { castTarget, expandPaths, issueLine, scanExitCode, scanFiles, type ScanResult } from "../measure/index.js";
import { renderScanCsv, renderScanJson, renderScanTable } from "../report/scan.js";
import { raiseExitCode, UserError } from "./errors.js";
import { stdoutStyle } from "./terminal.js";
import { parseFormatList } from "./lists.js";
import { createProgress } from "./progress.js";

/** Files at least this large together get a progress bar (when stderr is a terminal). */
const PROGRESS_BYTES = 256 * 1024 * 1024;
const MIB = 1024 * 1024;

interface ScanCommandOptions {
  to: string;
  json?: boolean;
  csv?: boolean;
  all?: boolean;
  overflow?: OverflowMode;
  flushSubnormals?: boolean;
  tolerance: string;
}

/** `headroom scan FILE...`: measure the tensors of safetensors and .npy files and judge casting them into formats. */
export async function runScan(patterns: string[], options: ScanCommandOptions): Promise<void> {
  if (options.json && options.csv) throw new UserError("--json and --csv exclude each other; pick one");
  const tolerance = Number(options.tolerance);
  if (!(tolerance >= 0 && tolerance <= 1)) {
    throw new UserError(`--tolerance ${JSON.stringify(options.tolerance)}: expected a share between 0 and 1, e.g. 0.001`);
  }
  const targets = parseFormatList("--to", options.to).map((format) =>
    castTarget(format, { ...(options.overflow ? { overflow: options.overflow } : {}), flushSubnormals: options.flushSubnormals === true }),
  );

  const expanded = await expandPaths(patterns);
  const sizes = await Promise.all(expanded.paths.map((p) => stat(p).then((s) => (s.isFile() ? s.size : 0), () => 0)));
  const totalBytes = sizes.reduce((a, b) => a + b, 0);
  const progress = createProgress({
    total: Math.ceil(totalBytes / MIB),
    label: "scanning MiB",
    enabled: process.stderr.isTTY === true && totalBytes >= PROGRESS_BYTES,
    // some terminals (and `script`) report 0 columns: draw for 80 then
    stream: { isTTY: process.stderr.isTTY, columns: process.stderr.columns || 80, write: (text: string) => process.stderr.write(text) },
  });
  let reported = 0;
  let finishedFiles = 0;
  const advanceTo = (bytes: number): void => {
    const mib = Math.floor(bytes / MIB);
    if (mib > reported) {
      progress.tick(mib - reported);
      reported = mib;
    }
  };
  let result: ScanResult;
  try {
    result = await scanFiles(expanded.paths, {
      targets,
      tolerance,
      onProgress: (bytesRead) => advanceTo(finishedFiles + bytesRead),
      onFile: (scan) => {
        finishedFiles += scan.size;
        advanceTo(finishedFiles);
      },
    });
  } finally {
    progress.finish();
  }
  // patterns that matched nothing count as files with an error
  for (const issue of expanded.issues) result.files.push({ file: issue.file, kind: null, size: 0, tensors: [], skipped: [], issues: [issue] });

  const all = options.all === true;
  // the machine outputs hold every tensor; --all widens only the table, which lists the tensors with findings by default
  if (options.json) process.stdout.write(renderScanJson(result));
  else if (options.csv) process.stdout.write(renderScanCsv(result));
  else process.stdout.write(renderScanTable(result, { all, style: stdoutStyle() }));
  for (const file of result.files) for (const issue of file.issues) process.stderr.write(`headroom: ${issueLine(issue)}\n`);
  raiseExitCode(scanExitCode(result));
}
