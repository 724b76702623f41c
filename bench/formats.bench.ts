/**
 * Bulk rounding throughput: binary64 → binary16 and → bfloat16 with headroom's kernels, side by side with a
 * loop over @petamoriken/float16's f16round (its fast path). Goals: binary16 at least 2× the f16round loop;
 * bfloat16 at least 100 M elements/s on one core. Run with `npm run bench` (not part of the tests).
 */
import { f16round } from "@petamoriken/float16";
import { bench, describe } from "vitest";
import { built } from "./built.js";

// the built library, loaded as a user's program loads it (bench/built.ts)
const { FORMATS, countClasses, roundArray } = await built<typeof import("../src/formats/index.js")>("formats/index.js");

// 65,536 elements per call (512 KiB per binary64 array): short calls are rarely interrupted on a shared machine,
// and the arrays stay in cache, so the figures measure the kernels rather than memory bandwidth
const ELEMENTS = 1 << 16;

/** Tensor-like data: Gaussian values over a spread of scales (weights, activations, gradients), random signs. */
function tensorLike(n: number, seed: number): Float64Array {
  let state = seed >>> 0;
  const uniform = (): number => {
    state = (state + 0x6d2b79f5) >>> 0;
    let t = state;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    const gaussian = Math.sqrt(-2 * Math.log(1 - uniform())) * Math.cos(2 * Math.PI * uniform());
    out[i] = gaussian * 2 ** Math.floor(uniform() * 16 - 12);
  }
  return out;
}

const source = tensorLike(ELEMENTS, 42);
const target = new Float64Array(ELEMENTS);
const source32 = Float32Array.from(source);
const target32 = new Float32Array(ELEMENTS);

// each variant checks what it computed, so the work cannot be optimised away
function check(value: number): void {
  if (Number.isNaN(value)) throw new Error("unexpected NaN");
}

const BASELINE = "f16round loop (binary16, @petamoriken/float16)";

const variants: Record<string, () => void> = {
  [BASELINE]: () => {
    for (let i = 0; i < ELEMENTS; i++) target[i] = f16round(source[i] as number);
    check(target[ELEMENTS - 1] as number);
  },
  "roundArray binary16 (Float64Array)": () => {
    roundArray(FORMATS.binary16, source, undefined, target);
    check(target[ELEMENTS - 1] as number);
  },
  "roundArray bfloat16 (Float64Array)": () => {
    roundArray(FORMATS.bfloat16, source, undefined, target);
    check(target[ELEMENTS - 1] as number);
  },
  "roundArray bfloat16 (Float32Array)": () => {
    roundArray(FORMATS.bfloat16, source32, undefined, target32);
    check(target32[ELEMENTS - 1] as number);
  },
  "countClasses binary16 (Float64Array)": () => {
    check(countClasses(FORMATS.binary16, source).total);
  },
};

/**
 * Elements per second of each variant, from its fastest call over interleaved rounds: on a shared machine the
 * fastest call is the one least disturbed by other work, and interleaving exposes every variant to the same load.
 */
function summary(): string {
  const rounds = 300;
  const totals = new Map<string, number>();
  for (const run of Object.values(variants)) run(); // warm up
  for (let round = 0; round < rounds; round++) {
    for (const [name, run] of Object.entries(variants)) {
      const start = performance.now();
      run();
      totals.set(name, Math.min(totals.get(name) ?? Infinity, performance.now() - start));
    }
  }
  const rate = (name: string): number => ELEMENTS / ((totals.get(name) ?? NaN) / 1000);
  const baseline = rate(BASELINE);
  const lines = ["", "elements per second (fastest of 300 interleaved calls each, same run):"];
  for (const name of Object.keys(variants)) {
    const value = rate(name);
    lines.push(`  ${name.padEnd(48)} ${(value / 1e6).toFixed(1).padStart(8)} M/s  ${(value / baseline).toFixed(2)}x the f16round loop`);
  }
  return lines.join("\n") + "\n";
}

describe(`bulk rounding, ${ELEMENTS.toLocaleString("en")} elements per call`, () => {
  const names = Object.keys(variants);
  for (const [name, run] of Object.entries(variants)) {
    const last = name === names[names.length - 1];
    bench(name, run, {
      time: 1500,
      // after the last variant's timed run, print elements per second and the ratios (vitest shows only hz)
      ...(last ? { teardown: (_task: unknown, mode?: string) => { if (mode === "run") process.stderr.write(summary()); } } : {}),
    });
  }
});
