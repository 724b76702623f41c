import { readdirSync, readFileSync } from "node:fs";
import { bench, describe } from "vitest";
import type { NetworkSpec } from "../src/spec/types.js";
import { built } from "./built.js";
import { mlpSpec } from "./generated-specs.js";

// the built library, loaded as a user's program loads it (bench/built.ts says why not src/)
const { check } = await built<typeof import("../src/check.js")>("check.js");
const { comparePlans } = await built<typeof import("../src/compare.js")>("compare.js");
const { buildGraph } = await built<typeof import("../src/graph/index.js")>("graph/index.js");
const { predict } = await built<typeof import("../src/magnitude/index.js")>("magnitude/index.js");
const { checkOptimizer } = await built<typeof import("../src/scale/optimizer.js")>("scale/optimizer.js");
const { parseSpec } = await built<typeof import("../src/spec/index.js")>("spec/index.js");

// The core check call (graph, prediction, risk, hazards, verdicts, loss-scale answer, optimizer) of the built library
// on every example spec and on a generated 1,000-layer spec; parsing is done outside the timed region. Milliseconds
// per spec: read the "mean" column. Goal (issue): under 20 ms for 1,000 layers. The risk module keeps the quantile
// levels and draw integrals of profiles it has seen (src/risk/profile.ts), so repeated calls on one spec run warm, as a
// batch of varied specs partly does; "a new variant each call" measures a spec the process has not seen.
const specs: [string, NetworkSpec][] = readdirSync("specs")
  .filter((name) => /\.ya?ml$/.test(name))
  .sort()
  .map((name) => {
    const parsed = parseSpec(readFileSync(`specs/${name}`, "utf8"), `specs/${name}`);
    if (!parsed.ok) throw new Error(`specs/${name} does not load`);
    return [name, parsed.spec];
  });

describe("check on each example spec", () => {
  for (const [name, spec] of specs) {
    bench(name, () => {
      const result = check(spec);
      // use the result so the work cannot be skipped
      if (result.tensors.length === 0) throw new Error(`${name}: no tensors`);
    });
  }
});

// The 1,000-layer rows are measured after 40 calls of their own: a process's first ~40 checks of this spec run partly
// unoptimised code (thread time per check in blocks of 15 fresh variants: 74.9 / 47.4 / 42.6 / 33.2 / 32.3 / 32.9 ms,
// Dec 2026), and tinybench's default warm-up (5 calls, 100 ms) left the rows inside that ramp. The first call of a
// process is what bench/cold-check.bench.ts measures.
const STEADY = { iterations: 10, time: 0, warmupIterations: 40, warmupTime: 0 };

describe("1,000-layer dense + ReLU spec", () => {
  const spec = mlpSpec();
  const network = buildGraph(spec);
  if (!network.ok) throw new Error("the generated spec does not build");
  const graph = network.graph;
  bench("predict alone", () => {
    if (predict(graph, spec).tensors.length === 0) throw new Error("no tensors");
  });
  bench("check", () => {
    if (check(spec).tensors.length === 0) throw new Error("no tensors");
  }, STEADY);
  // the same spec with its input scale moved by 2^-20 per call: every magnitude differs in its last bits, so no
  // quantile level or draw integral memoised by an earlier call serves it (the first check of a new spec)
  let fresh = 0;
  bench("check, a new variant each call", () => {
    fresh += 1;
    if (check(mlpSpec(1 + fresh * 2 ** -20)).tensors.length === 0) throw new Error("no tensors");
  }, STEADY);
  // the same with weights that do not grow over the horizon (1.1 per layer compounds through 500 layers into overflow):
  // the network fits binary16 at a loss scale, so the scales of its window are weighed and 1 is judged too, the work a
  // check of a network that trains does
  let fitting = 0;
  bench("check, a new variant each call, weight growth 1", () => {
    fitting += 1;
    const variant = mlpSpec(1 + fitting * 2 ** -20);
    variant.training.horizon.weightGrowth = 1;
    if (check(variant).tensors.length === 0) throw new Error("no tensors");
  }, STEADY);
  // the check and JSON.stringify of its result, as `headroom check --json` gives it: a result works out some fields
  // when first read (src/risk/tensor-check.ts), and every one of them is read here
  let serialised = 0;
  bench("check and its JSON, a new variant each call", () => {
    serialised += 1;
    if (JSON.stringify(check(mlpSpec(1 - serialised * 2 ** -20))).length === 0) throw new Error("an empty result");
  }, STEADY);
  const prediction = predict(graph, spec);
  bench("checkOptimizer alone", () => {
    if (checkOptimizer(spec.training.optimizer, spec.precision, prediction).tensors.length === 0) throw new Error("no weights");
  });
});

describe("a long causal decoder", () => {
  // transformer-encoder's blocks made causal, 24 of them over 8,192 tokens: its softmax rows of every length 1 … 8,192
  // (src/numeric/softmax.ts) were most of such a check; the token table's std moves by 1e-6 per call, so no memoised
  // row set or law serves it
  const text = readFileSync("specs/transformer-encoder.yaml", "utf8")
    .replace("tokens: 256", "tokens: 8192")
    .replace("causal: false", "causal: true")
    .replace("times: 6", "times: 24");
  const parsed = parseSpec(text, "long-decoder.yaml");
  if (!parsed.ok) throw new Error("the long decoder does not load");
  const decoder = parsed.spec;
  let variant = 0;
  bench("check, 24 causal blocks over 8,192 tokens, a new variant each call", () => {
    variant += 1;
    const layers = decoder.layers.map((layer, i) => (i === 0 && layer.family === "embedding" ? { ...layer, init: { ...layer.init, std: 0.02 * (1 + variant * 1e-6) } } : layer));
    if (check({ ...decoder, layers }).tensors.length === 0) throw new Error("no tensors");
  }, { iterations: 3, time: 0 });
});

describe("compare on one example", () => {
  const found = specs.find(([name]) => name === "deep-relu-he.yaml") ?? specs[0];
  if (found === undefined) throw new Error("no example specs");
  bench(`comparePlans ${found[0]}`, () => {
    if (comparePlans(found[1]).outcomes.length === 0) throw new Error("no outcomes");
  }, { iterations: 3, time: 0 });
});
