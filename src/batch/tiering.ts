/**
 * V8 tiering for a batch whose workers fill every core. Each worker thread is its own V8 isolate and
 * compiles check() afresh; with V8's defaults an isolate spends on TurboFan compiles, on V8's background
 * threads, about half as much processor time as on checking 1,000 specs (optimising everything that
 * runs a few times, inlining deeply, deoptimising and compiling again). One worker gets those compiles
 * for free on a spare core; workers that fill the cores pay for them with checking time. A larger
 * interrupt budget optimises only code that stays hot and a smaller cumulative inlining budget makes
 * each compile cheaper: the pool's processor time falls by about a quarter (measured on Node 20's V8 11.3,
 * DEVELOPERS.md "Batch pool and V8 tiering"). V8 flags are per process, so they are set only while such a
 * pool runs and put back afterwards; callers of check() alone, and batches that leave a core spare, keep
 * V8's defaults.
 */
import { availableParallelism } from "node:os";
import { setFlagsFromString } from "node:v8";

/** A flag a batch sets, with V8 11.3's default (Node 20), which it puts back. */
interface BatchFlag {
  name: string;
  batch: number;
  v8Default: number;
}

/** Optimise later (V8's budget 67,584) and inline less per compile (V8's 920). */
export const BATCH_V8_FLAGS: readonly BatchFlag[] = [
  { name: "--interrupt-budget", batch: 270_000, v8Default: 67_584 },
  { name: "--max-inlined-bytecode-size-cumulative", batch: 200, v8Default: 920 },
];

/**
 * The batch flags to set: none unless the engine is the one they were measured on (V8 11, Node 20) and
 * the workers fill every core; never one the process was started with (in its arguments or
 * NODE_OPTIONS, in either spelling), which is the user's choice.
 */
export function batchFlagsToSet(
  workers: number,
  cores: number,
  v8Version: string,
  execArgv: readonly string[],
  nodeOptions = "",
): BatchFlag[] {
  if (workers < cores || !v8Version.startsWith("11.")) return [];
  const given = [...execArgv, ...nodeOptions.split(/\s+/)].map((arg) => arg.split("=")[0]!.replace(/_/g, "-"));
  return BATCH_V8_FLAGS.filter((flag) => !given.includes(flag.name));
}

let active = 0; // pools running with the batch flags
let tuned: BatchFlag[] = [];

/**
 * Set the batch flags for a pool of `workers` threads (workers started afterwards take them); the
 * returned function puts V8's defaults back once the last such pool has ended. `v8Version` is the
 * running engine's unless a test names another.
 */
export function tuneTieringForBatch(workers: number, v8Version: string = process.versions.v8): () => void {
  if (active === 0) {
    tuned = batchFlagsToSet(workers, availableParallelism(), v8Version, process.execArgv, process.env.NODE_OPTIONS);
    if (tuned.length === 0) return () => {};
    for (const flag of tuned) setFlagsFromString(`${flag.name}=${flag.batch}`);
  }
  active += 1;
  let ended = false;
  return () => {
    if (ended) return;
    ended = true;
    active -= 1;
    if (active === 0) for (const flag of tuned) setFlagsFromString(`${flag.name}=${flag.v8Default}`);
  };
}

/**
 * A batch worker's young generation in MB: four times V8's default (48 MB, three 16 MB semi-spaces on 64-bit V8 11),
 * unless the process was started with a young-generation flag (the user's choice, which workers inherit). A check keeps
 * its result alive while making it (~7 MB for 1,000 layers), and every young collection inside a check copies the part
 * made so far; with room for several checks between collections, most of them fall between checks. A batch of 60
 * fresh 1,000-layer specs on two workers took 0.89–0.93× the processor time (RSS 335 → 480 MB; DEVELOPERS.md "Batch
 * pool and V8 tiering").
 */
export const BATCH_YOUNG_GENERATION_MB = 192;

/** {@link BATCH_YOUNG_GENERATION_MB}, or undefined (V8's size) when the process was started with a young-generation flag. */
export function batchYoungGenerationMb(execArgv: readonly string[], nodeOptions = ""): number | undefined {
  const given = [...execArgv, ...nodeOptions.split(/\s+/)].map((arg) => arg.split("=")[0]!.replace(/_/g, "-"));
  const young = ["--max-semi-space-size", "--min-semi-space-size", "--semi-space-growth-factor"];
  return given.some((flag) => young.includes(flag)) ? undefined : BATCH_YOUNG_GENERATION_MB;
}
