/**
 * What the comparison scripts share: the checking thread's processor time and one child process per round.
 */
import { execFileSync } from "node:child_process";
import { readFileSync } from "node:fs";
import { resolve } from "node:path";

/**
 * Milliseconds of processor time this thread has run (/proc/thread-self/schedstat, Linux). The kernel adds a running
 * thread's time at its timer ticks (4 ms here), so time many calls together, never one.
 */
export function threadMs() {
  return Number(readFileSync("/proc/thread-self/schedstat", "utf8").split(" ")[0]) / 1e6;
}

/**
 * Checks of the 1,000-layer spec a process runs before any is measured. Its first calls run partly unoptimised code:
 * thread time per check in blocks of 15 fresh variants went 74.9 / 47.4 / 42.6 / 33.2 / 32.3 / 32.9 ms (Dec 2026), so
 * about 40 calls pass before V8 has compiled what a check runs hot; the first call alone is bench/cold-check.bench.ts's.
 */
export const WARM_UP_CHECKS = 40;

/** A build's check module and spec reader, from its dist folder. */
export async function loadBuild(dist) {
  const root = resolve(dist);
  const { check } = await import(`${root}/check.js`);
  const { parseSpec } = await import(`${root}/spec/index.js`);
  return { check, parseSpec };
}

/** Runs `script` with `args` in a fresh node process and returns its one line of JSON. */
export function child(script, args) {
  return JSON.parse(execFileSync(process.execPath, [script, ...args], { encoding: "utf8", maxBuffer: 1 << 24 }));
}

/** Reads `--name value` options after the positional arguments. */
export function options(argv, defaults) {
  const positional = [];
  const out = { ...defaults };
  for (let i = 0; i < argv.length; i++) {
    const arg = argv[i];
    if (arg.startsWith("--")) {
      const key = arg.slice(2);
      if (!(key in defaults)) throw new Error(`unknown option ${arg}; known: ${Object.keys(defaults).map((k) => "--" + k).join(", ")}`);
      out[key] = Number(argv[++i]);
      if (!Number.isFinite(out[key])) throw new Error(`${arg} needs a number`);
    } else positional.push(arg);
  }
  return { positional, options: out };
}

/**
 * Runs `round(dist, which, r)` for both builds in each of `rounds` rounds, the order swapped every other round so that
 * neither build always meets the machine's later minute; returns each build's list of what the rounds gave.
 */
export function alternating(rounds, [baseDist, newDist], round) {
  const runs = { base: [], new: [] };
  for (let r = 0; r < rounds; r++) {
    for (const which of r % 2 === 0 ? ["base", "new"] : ["new", "base"]) runs[which].push(round(which === "base" ? baseDist : newDist, r));
  }
  return runs;
}
