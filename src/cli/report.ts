import { randomBytes } from "node:crypto";
import { renameSync, rmSync, writeFileSync } from "node:fs";
import { dirname, basename, join } from "node:path";
import { createRequire } from "node:module";
import { Option } from "commander";
import { renderHtmlReport } from "../report/html.js";
import { reportModel } from "../report/report-from-check.js";
import { addJudgeOptions, loadAndCheck, type JudgeFlags } from "./check.js";
import type { RegisterCommand } from "./commands.js";
import { UserError } from "./errors.js";
import { writeOut } from "./batch.js";

/** The package version, printed in the report's footer. */
export const PACKAGE_VERSION: string = (createRequire(import.meta.url)("../../package.json") as { version: string }).version;

/**
 * Write a file whole or not at all: into a temporary file beside it, then renamed over the target
 * (a rename within one folder is atomic on POSIX file systems).
 */
export function writeFileAtomic(path: string, text: string): void {
  const temporary = join(dirname(path), `.${basename(path)}.${randomBytes(6).toString("hex")}.tmp`);
  try {
    writeFileSync(temporary, text, { flag: "wx" });
    renameSync(temporary, path);
  } catch (error) {
    rmSync(temporary, { force: true });
    const code = (error as { code?: unknown }).code;
    if (typeof code === "string") throw new UserError(`${path}: cannot write the report (${code})`);
    throw error;
  }
}

/** `headroom report SPEC -o FILE.html`: one self-contained HTML page about a spec. */
export const register: RegisterCommand = (program) => {
  const command = program
    .command("report")
    .argument("<spec>", "network spec file (.yaml, .yml or .json)")
    .description(
      "Write one self-contained HTML page about a spec (no scripts, no network access): the verdict, every tensor's " +
        "predicted magnitudes against the ranges of the planned formats, the loss-scale window, the ledger of the worst " +
        "tensor and the tables. Exit code 0 when written, 2 for input errors. Predictions are estimates; confirm with a short run.",
    )
    .addOption(new Option("-o, --output <file>", "write the page to this file (default: stdout)"));
  addJudgeOptions(command).action(async (path: string, flags: JudgeFlags & { output?: string }) => {
    const result = await loadAndCheck(path, flags, { ledger: true });
    if (result === undefined) return;
    const html = renderHtmlReport(reportModel(result, { version: PACKAGE_VERSION }));
    if (flags.output === undefined || flags.output === "-") await writeOut(html);
    else writeFileAtomic(flags.output, html);
  });
};
