/**
 * The simulator's matrix kernels on a realistic step: a 48-block residual MLP of width 256 with batch 64
 * (each block x + W2·relu(W1·x), He-initialised), forward, mean-squared-error gradient, backward and an SGD
 * update, one step per iteration. The same step runs with the blocked products of src/numeric/matmul.ts
 * and with a naive triple-loop product kept here only for comparison; GFLOP/s counts 2·m·n·k per product.
 */
import { loadavg } from "node:os";
import { bench, describe } from "vitest";
import { built } from "./built.js";

// the built library, loaded as a user's program loads it (bench/built.ts)
const { matmul, matmulTransposeA, matmulTransposeB } = await built<typeof import("../src/numeric/matmul.js")>("numeric/matmul.js");
const { createRandom } = await built<typeof import("../src/numeric/random.js")>("numeric/random.js");

const BLOCKS = 48;
const WIDTH = 256;
const BATCH = 64;

type Product = (a: Float64Array, b: Float64Array, c: Float64Array, m: number, k: number, n: number) => void;
interface Products {
  ab: Product;
  abT: Product;
  aTb: Product;
}

const blocked: Products = { ab: matmul, abT: matmulTransposeB, aTb: matmulTransposeA };

// The naive triple loop, i-j-p, one dot product per element, reading the operands in their stored layout.
const naive: Products = {
  ab(a, b, c, m, k, n) {
    for (let i = 0; i < m; i++)
      for (let j = 0; j < n; j++) {
        let s = 0;
        for (let p = 0; p < k; p++) s += a[i * k + p]! * b[p * n + j]!;
        c[i * n + j] = s;
      }
  },
  abT(a, b, c, m, k, n) {
    for (let i = 0; i < m; i++)
      for (let j = 0; j < n; j++) {
        let s = 0;
        for (let p = 0; p < k; p++) s += a[i * k + p]! * b[j * k + p]!;
        c[i * n + j] = s;
      }
  },
  aTb(a, b, c, m, k, n) {
    for (let i = 0; i < m; i++)
      for (let j = 0; j < n; j++) {
        let s = 0;
        for (let p = 0; p < k; p++) s += a[p * m + i]! * b[p * n + j]!;
        c[i * n + j] = s;
      }
  },
};

interface Network {
  w1: Float64Array[];
  w2: Float64Array[];
  x: Float64Array;
  target: Float64Array;
}

function makeNetwork(): Network {
  const random = createRandom(2026);
  const he = Math.sqrt(2 / WIDTH);
  const matrix = (scale: number): Float64Array => {
    const m = new Float64Array(WIDTH * WIDTH);
    for (let i = 0; i < m.length; i++) m[i] = scale * random.normal();
    return m;
  };
  const vector = (n: number): Float64Array => Float64Array.from({ length: n }, () => random.normal());
  return {
    // the second layer of each branch is scaled down so the residual stream stays finite over 48 blocks
    w1: Array.from({ length: BLOCKS }, () => matrix(he)),
    w2: Array.from({ length: BLOCKS }, () => matrix(he / Math.sqrt(BLOCKS))),
    x: vector(BATCH * WIDTH),
    target: vector(BATCH * WIDTH),
  };
}

/** Six products per block (two forward, four backward): the floating-point operations of one step. */
const FLOPS_PER_STEP = BLOCKS * 6 * 2 * BATCH * WIDTH * WIDTH;

/** One training step; returns the loss so the work cannot be optimised away. */
function step(net: Network, p: Products): number {
  const n = BATCH * WIDTH;
  const streams: Float64Array[] = [net.x];
  const hidden: Float64Array[] = [];
  for (let b = 0; b < BLOCKS; b++) {
    const x = streams[b]!;
    const h = new Float64Array(n);
    p.abT(x, net.w1[b]!, h, BATCH, WIDTH, WIDTH);
    for (let i = 0; i < n; i++) if (h[i]! < 0) h[i] = 0;
    hidden.push(h);
    const y = new Float64Array(n);
    p.abT(h, net.w2[b]!, y, BATCH, WIDTH, WIDTH);
    for (let i = 0; i < n; i++) y[i] = y[i]! + x[i]!;
    streams.push(y);
  }
  const out = streams[BLOCKS]!;
  let loss = 0;
  let dy = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    const d = out[i]! - net.target[i]!;
    loss += d * d;
    dy[i] = (2 * d) / n;
  }
  const lr = 1e-3;
  const dw = new Float64Array(WIDTH * WIDTH);
  for (let b = BLOCKS - 1; b >= 0; b--) {
    const x = streams[b]!;
    const h = hidden[b]!;
    // branch: dh = dy·W2 masked by relu; dW2 = dyᵀ·h; dW1 = dhᵀ·x; dx = dy + dh·W1
    const dh = new Float64Array(n);
    p.ab(dy, net.w2[b]!, dh, BATCH, WIDTH, WIDTH);
    for (let i = 0; i < n; i++) if (h[i] === 0) dh[i] = 0;
    p.aTb(dy, h, dw, WIDTH, BATCH, WIDTH);
    const w2 = net.w2[b]!;
    for (let i = 0; i < dw.length; i++) w2[i] = w2[i]! - lr * dw[i]!;
    p.aTb(dh, x, dw, WIDTH, BATCH, WIDTH);
    const w1 = net.w1[b]!;
    const dx = new Float64Array(n);
    p.ab(dh, w1, dx, BATCH, WIDTH, WIDTH);
    for (let i = 0; i < dw.length; i++) w1[i] = w1[i]! - lr * dw[i]!;
    for (let i = 0; i < n; i++) dx[i] = dx[i]! + dy[i]!;
    dy = dx;
  }
  return loss / n;
}

interface Timing {
  wallMs: number;
  cpuMs: number;
}

const timings: Record<"blocked" | "naive", Timing[]> = { blocked: [], naive: [] };
const ITERATIONS = { blocked: 5, naive: 2 };

function timed(name: "blocked" | "naive", p: Products): () => void {
  const net = makeNetwork();
  return () => {
    const wall = performance.now();
    const cpu = process.cpuUsage();
    const loss = step(net, p);
    const used = process.cpuUsage(cpu);
    timings[name].push({ wallMs: performance.now() - wall, cpuMs: (used.user + used.system) / 1000 });
    if (!Number.isFinite(loss)) throw new Error(`the ${name} step gave a non-finite loss ${loss}`);
  };
}

const median = (xs: number[]): number => [...xs].sort((a, b) => a - b)[Math.floor(xs.length / 2)]!;

let naiveTeardowns = 0;

/**
 * Printed once, after the naive loop's timed run (its second teardown; the first follows the warm-up). The
 * machine may be shared, so CPU time is shown beside wall time.
 */
function summary(): void {
  naiveTeardowns++;
  if (naiveTeardowns < 2 || timings.naive.length < ITERATIONS.naive || timings.blocked.length < ITERATIONS.blocked) return;
  const load = loadavg().map((l) => l.toFixed(1)).join(", ");
  const lines = [`\nresidual MLP step: ${(FLOPS_PER_STEP / 1e9).toFixed(3)} GFLOP per step (median of timed steps; load average ${load})`];
  const rate = (ms: number): string => `${(FLOPS_PER_STEP / ms / 1e6).toFixed(2)} GFLOP/s`;
  for (const name of ["blocked", "naive"] as const) {
    const wall = median(timings[name].map((t) => t.wallMs));
    const cpu = median(timings[name].map((t) => t.cpuMs));
    lines.push(`  ${name.padEnd(8)} wall ${wall.toFixed(0).padStart(6)} ms (${rate(wall)})   cpu ${cpu.toFixed(0).padStart(6)} ms (${rate(cpu)})`);
  }
  const ratio = (key: "wallMs" | "cpuMs"): string =>
    (median(timings.naive.map((t) => t[key])) / median(timings.blocked.map((t) => t[key]))).toFixed(1);
  lines.push(`  blocked is ${ratio("wallMs")}x the naive loop by wall time, ${ratio("cpuMs")}x by CPU time`);
  console.log(lines.join("\n"));
}

describe(`residual MLP, ${BLOCKS} blocks, width ${WIDTH}, batch ${BATCH}: one step forward + backward`, () => {
  bench("blocked products (src/numeric/matmul.ts)", timed("blocked", blocked), {
    iterations: ITERATIONS.blocked,
    time: 0,
    warmupIterations: 1,
    warmupTime: 0,
    setup: () => void (timings.blocked = []),
  });
  bench("naive triple loop", timed("naive", naive), {
    iterations: ITERATIONS.naive,
    time: 0,
    warmupIterations: 1,
    warmupTime: 0,
    setup: () => void (timings.naive = []),
    teardown: summary,
  });
});
