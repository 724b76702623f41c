import { createRequire } from "node:module";
import { renderHtmlReport } from "../report/html.js";
import { reportModel } from "../report/report-from-check.js";
import { loadAndCheck, type JudgeFlags } from "./check.js";
import { writeFileAtomic, writeOut } from "./shared.js";

/** The package version, printed in the report's footer. */
export const PACKAGE_VERSION: string = (createRequire(import.meta.url)("../../package.json") as { version: string }).version;

/** `headroom report SPEC -o FILE.html`: one self-contained HTML page about a spec. */
export async function runReport(path: string, flags: JudgeFlags & { output?: string }): Promise<void> {
  const warnings: string[] = [];
  const result = await loadAndCheck(path, flags, { ledger: true }, warnings);
  if (result === undefined) return;
  const html = renderHtmlReport(reportModel(result, { version: PACKAGE_VERSION, warnings }));
  if (flags.output === undefined || flags.output === "-") await writeOut(html);
  else writeFileAtomic(flags.output, html);
}
