/**
 * The batch API on the real file system: expand paths (files, folders, globs), build the variants
 * and run the pool. Path expansion reads folders here; everything else in src/batch is pure or
 * runs in the worker.
 */
import { readdirSync, readFileSync, statSync } from "node:fs";
import { MAX_SPEC_BYTES } from "../spec/index.js";
import { expandInputs, type PathHost } from "./paths.js";
import { runBatch, type RunBatchOptions } from "./run.js";
import type { BatchRow } from "./types.js";
import { parseVaryOption, variantsOf } from "./vary.js";

/** The file system as path expansion sees it (symbolic links followed for files, not walked for folders). */
export const nodePathHost: PathHost = {
  kind(path) {
    try {
      const info = statSync(path);
      return info.isFile() ? "file" : info.isDirectory() ? "folder" : "other";
    } catch {
      return undefined;
    }
  },
  list(path) {
    try {
      return readdirSync(path, { withFileTypes: true }).map((entry) => ({
        name: entry.name,
        kind: entry.isFile() ? "file" : entry.isDirectory() ? "folder" : entry.isSymbolicLink() ? "link" : "other",
      }));
    } catch {
      return [];
    }
  },
  read(path) {
    try {
      // a file above the spec size limit is not read here: its row says it is too large, as for a .yaml file
      return statSync(path).size > MAX_SPEC_BYTES ? undefined : readFileSync(path, "utf8");
    } catch {
      return undefined;
    }
  },
};

/** Options of {@link batchCheck}. */
export interface BatchCheckOptions extends Pick<RunBatchOptions, "workers" | "workerUrl" | "onRow"> {
  /** `KEY=V1,V2,...` variations, as `--vary` takes them; their cross product is checked for every file */
  vary?: readonly string[];
  /** check options passed to every worker, e.g. `{ plan: "all-bfloat16" }` */
  check?: { plan?: string; formats?: readonly string[]; lossScale?: number };
  /** the paths an argument `-` stands for */
  stdinPaths?: readonly string[];
}

/**
 * Check every spec that `paths` name (files, folders searched for *.yaml/*.yml and JSON specs, globs with * ? **)
 * on a pool of worker threads. Resolves to one row per spec (or variant) in input order; bad files
 * and specs are rows with positioned errors. Throws a VaryError for a malformed `vary` option.
 * @example (await batchCheck(["specs"])).filter((row) => row.status === "ok" && row.summary.verdict !== "fits")
 */
export async function batchCheck(paths: readonly string[], options: BatchCheckOptions = {}): Promise<BatchRow[]> {
  if (!Array.isArray(paths) || paths.some((path) => typeof path !== "string")) {
    throw new TypeError(`batchCheck needs an array of paths, got ${JSON.stringify(paths)}`);
  }
  const variants = variantsOf((options.vary ?? []).map(parseVaryOption));
  const inputs = expandInputs(nodePathHost, paths, { stdinPaths: options.stdinPaths ?? [] });
  return runBatch(inputs, variants, {
    ...(options.workers !== undefined ? { workers: options.workers } : {}),
    ...(options.workerUrl !== undefined ? { workerUrl: options.workerUrl } : {}),
    ...(options.onRow !== undefined ? { onRow: options.onRow } : {}),
    workerData: { check: options.check ?? {} },
  });
}
