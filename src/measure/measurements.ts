/**
 * Loading what a spec's `measured` section names: trained weights (tensor files) and a recorded-statistics file,
 * with their problems as one-line messages. The check then calibrates with them (calibrate.ts).
 */
import { readFile, stat } from "node:fs/promises";
import { dirname, isAbsolute, join } from "node:path";
import type { MeasuredSpec } from "../spec/types.js";
import { readWeightFiles, type WeightFileData } from "./calibrate.js";
import { parseRecordedStatistics, type RecordedStatistic } from "./statistics.js";
import { issueLine } from "./types.js";

/** Recorded-statistics files larger than this are refused (a statistics file is a few rows per tensor). */
export const MAX_STATISTICS_BYTES = 100 * 1024 * 1024;

/** What a spec's `measured` section yielded. */
export interface Measurements {
  weights?: WeightFileData;
  statistics?: RecordedStatistic[];
  /** the statistics file, as resolved */
  statisticsFile?: string;
  /** problems, one line each: file, then the tensor and byte offset, or the line and column */
  problems: string[];
}

/** Read the weight files and the statistics file a spec names; paths are relative to the spec's folder. */
export async function loadMeasurements(measured: MeasuredSpec, specSource: string): Promise<Measurements> {
  const out: Measurements = { problems: [] };
  if (measured.weights.length > 0) {
    out.weights = await readWeightFiles(measured.weights, specSource);
    for (const issue of out.weights.issues) out.problems.push(issueLine(issue));
  }
  if (measured.statistics !== undefined) {
    const base = specSource === "<memory>" ? "." : dirname(specSource);
    const file = isAbsolute(measured.statistics) ? measured.statistics : join(base, measured.statistics);
    out.statisticsFile = file;
    try {
      const size = (await stat(file)).size;
      if (size > MAX_STATISTICS_BYTES) throw new RangeError(`${size} bytes; statistics files up to 100 MB are read`);
      const parsed = parseRecordedStatistics(await readFile(file, "utf8"), file);
      if (parsed.ok) out.statistics = parsed.statistics;
      else {
        for (const issue of parsed.issues) {
          const where = issue.line !== undefined ? `:${issue.line}:${issue.column ?? 1}` : issue.path !== undefined ? `: ${issue.path}` : "";
          out.problems.push(`${file}${where}: ${issue.message}`);
        }
      }
    } catch (error) {
      const code = (error as { code?: unknown }).code;
      out.problems.push(`${file}: cannot read: ${code === "ENOENT" ? "no such file" : error instanceof Error ? error.message : String(error)}`);
    }
  }
  return out;
}
