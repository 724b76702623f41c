/**
 * V8 tiering for a batch. Every worker thread is its own V8 isolate and compiles check() afresh: with
 * V8's defaults each isolate spends about as much processor time on TurboFan compiles on V8's
 * background threads (optimising everything that runs a few times, inlining deeply, then deoptimising
 * and compiling again) as on checking 1,000 specs, so on two cores the pool's workers fight their own
 * compiler. A larger interrupt budget optimises only code that stays hot, and a smaller cumulative
 * inlining budget makes each compile cheaper; measured on the bench's 1,000 specs (2 cores,
 * DEVELOPERS.md "Batch pool"), the pool's processor time fell by about a third and one worker's
 * checking thread did not slow. V8 flags are per process, so this is set only when a batch starts its
 * pool, never for callers of check() alone.
 */
import { setFlagsFromString } from "node:v8";

/** The V8 flags a batch sets: optimise later (default budget 67,584) and inline less per compile (default 920). */
export const BATCH_V8_FLAGS: readonly string[] = ["--interrupt-budget=270000", "--max-inlined-bytecode-size-cumulative=200"];

/**
 * The flags of {@link BATCH_V8_FLAGS} that the user has not set: one the process was started with (in
 * its arguments or NODE_OPTIONS) is the user's choice and stays.
 */
export function batchFlagsToSet(execArgv: readonly string[], nodeOptions = ""): string[] {
  const given = [...execArgv, ...nodeOptions.split(/\s+/)].map((arg) => arg.split("=")[0]!.replace(/_/g, "-"));
  return BATCH_V8_FLAGS.filter((flag) => !given.includes(flag.split("=")[0]!));
}

let tuned = false;

/** Set the batch's V8 flags for this process (once; workers started afterwards inherit them). */
export function tuneTieringForBatch(): void {
  if (tuned) return;
  tuned = true;
  for (const flag of batchFlagsToSet(process.execArgv, process.env.NODE_OPTIONS)) setFlagsFromString(flag);
}
