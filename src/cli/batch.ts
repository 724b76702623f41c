import { nodePathHost } from "../batch/files.js";
import { expandInputs, pathsFromText } from "../batch/paths.js";
import { runBatch } from "../batch/run.js";
import type { BatchWorkerData } from "../batch/worker.js";
import { batchExitCode } from "../batch/types.js";
import { raiseExitCode, UserError } from "./errors.js";
import { createProgress, type Progress } from "./progress.js";
import { readStdin, variantsFromOptions, writeOut } from "./shared.js";

function parseWorkers(text: string | undefined): number | undefined {
  if (text === undefined) return undefined;
  const value = Number(text);
  if (!Number.isInteger(value) || value < 1 || value > 256) {
    throw new UserError(`--workers: expected a whole number from 1 to 256, got "${text}"`);
  }
  return value;
}

/** The flags of `batch` (src/cli/commands/batch.ts). */
export interface BatchFlags {
  vary?: string[];
  jsonl?: boolean;
  csv?: boolean;
  md?: boolean;
  workers?: string;
  plan?: string;
  color?: boolean;
}

// dist/cli/ → dist/batch/worker.js, the same from the bundle's chunks, which sit beside it
const WORKER_URL = new URL("../batch/worker.js", import.meta.url);

/** `headroom batch PATH...`: check many specs in parallel; one row per spec (or variant). */
export async function runBatchCommand(paths: string[], flags: BatchFlags): Promise<void> {
  const variants = variantsFromOptions(flags.vary);
  const workers = parseWorkers(flags.workers);
  const stdinPaths = paths.includes("-") ? pathsFromText(await readStdin()) : [];
  const inputs = expandInputs(nodePathHost, paths, { stdinPaths });
  let progressDone = 0;
  if (inputs.length === 0) throw new UserError("batch: no spec files given (stdin listed no paths)");
  let progress: Progress | undefined;
  let rows;
  let render;
  try {
    const running = runBatch(inputs, variants, {
      ...(workers !== undefined ? { workers } : {}),
      // the built worker, named from here: the command line is bundled (scripts/bundle-worker.mjs), and the default
      // (run.ts's own neighbour) would then be looked for beside this bundle
      workerUrl: WORKER_URL,
      workerData: {
        check: flags.plan !== undefined ? { plan: flags.plan } : {},
        // --vary needs the JSON Schema in every worker: built here once, not once per worker
        ...(variants.length > 0 ? { schema: (await import("../spec/index.js")).specJsonSchema() } : {}),
      } satisfies BatchWorkerData,
      onRow: (done, total) => {
        progress ??= createProgress({ total, label: "checking" });
        progress.tick(done - progressDone);
        progressDone = done;
      },
    });
    // the renderers load while the workers start and check, not before them
    [rows, render] = await Promise.all([running, import("./batch-render.js")]);
  } finally {
    progress?.finish();
  }
  const text = render.renderBatch(rows, flags);
  await writeOut(text);
  raiseExitCode(batchExitCode(rows));
}
