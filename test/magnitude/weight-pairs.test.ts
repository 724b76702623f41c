/**
 * Check's own prediction knows which weight gradient each weight made (src/magnitude/predict.ts knownWeightPairs); the
 * optimizer check takes those pairs in place of its search by layer name and id suffix (src/scale/optimizer.ts
 * weightPairs). Checked against that search, the definition the optimizer had before: wherever the known pairs answer
 * they are the search's, object for object and in its order, and they answer for every network whose layer names hold
 * no colon.
 */
import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import { knownWeightPairs, predictForCheck } from "../../src/magnitude/predict.js";
import type { Prediction } from "../../src/magnitude/types.js";
import { PredictionRangeError } from "../../src/magnitude/range.js";
import { weightPairs } from "../../src/scale/optimizer.js";
import type { LayerSpec, NetworkSpec } from "../../src/spec/types.js";
import { act, attention, conv, dense, dropout, embedding, features, flatten, gated, he, image, makeSpec, mse, norm, pool, residual, tokens } from "./build-spec.js";

function built(spec: NetworkSpec): ReturnType<typeof buildGraph> & { ok: true } {
  const result = buildGraph(spec);
  if (!result.ok) throw new Error(result.issues.map((i) => i.message).join("; "));
  return result;
}

/**
 * The known pairs of check's prediction of `spec` against the search's; whether the known pairs answered (null for a
 * network the prediction turns down as leaving binary64's range, which some random stacks do).
 */
function agrees(spec: NetworkSpec): { answered: boolean; pairs: number } | null {
  let kept: Prediction;
  try {
    kept = predictForCheck(built(spec).graph, spec);
  } catch (error) {
    if (error instanceof PredictionRangeError) return null;
    throw error;
  }
  const searched = weightPairs(kept);
  const known = knownWeightPairs(kept.tensors);
  if (known !== undefined) {
    expect(known.length).toBe(searched.length);
    for (let i = 0; i < known.length; i++) {
      expect(known[i]!.weight).toBe(searched[i]!.weight);
      expect(known[i]!.gradient).toBe(searched[i]!.gradient);
    }
  }
  return { answered: known !== undefined, pairs: searched.length };
}

// one block of a features network, named from `name` (which may hold a colon)
function block(kind: number, name: string, width: number, bias: boolean): LayerSpec[] {
  switch (kind) {
    case 0:
      return [dense(`${name}d`, width, he, bias), act(`${name}a`)];
    case 1:
      return [norm(`${name}n`, "layer-norm")];
    case 2:
      return [norm(`${name}r`, "rms-norm"), dropout(`${name}p`, 0.1)];
    case 3:
      return [residual(`${name}s`, [dense(`${name}sd`, width, he, bias), act(`${name}sa`, "gelu"), dense(`${name}se`, width, he, bias)])];
    case 4:
      return [attention(`${name}t`, 2, width / 2)];
    case 5:
      return [gated(`${name}g`, 2 * width)];
    default:
      return [norm(`${name}b`, "batch-norm")];
  }
}

describe("the weight pairs check's prediction knows", () => {
  it("are the optimizer's search's wherever they answer, and answer wherever no layer name holds a colon (random networks)", () => {
    let answered = 0;
    let runs = 0;
    fc.assert(
      fc.property(
        fc.array(fc.record({ kind: fc.integer({ min: 0, max: 6 }), bias: fc.boolean(), colon: fc.boolean() }), { minLength: 1, maxLength: 6 }),
        fc.constantFrom(8, 16),
        // (attention over one position passes no gradient to its logits: two or more)
        fc.constantFrom(2, 3),
        fc.boolean(),
        fc.constantFrom(1, 1.25),
        (blocks, width, positions, anyColon, weightGrowth) => {
          const layers: LayerSpec[] = [];
          blocks.forEach((b, i) => layers.push(...block(b.kind, anyColon && b.colon ? `b:${i}` : `b${i}`, width, b.bias)));
          layers.push(dense("head", 4, he, true));
          const spec = makeSpec(layers, { input: features(width, positions), loss: mse(), training: { horizon: { steps: 1000, weightGrowth } } });
          const result = agrees(spec);
          fc.pre(result !== null);
          runs++;
          const colons = anyColon && blocks.some((b) => b.colon);
          if (!colons) expect(result.answered).toBe(true);
          if (result.answered) answered++;
          expect(result.pairs).toBeGreaterThan(0);
        },
      ),
      { numRuns: 60 },
    );
    // a fair share answers (the rest have a colon in some layer name, and the search answers for them)
    expect(answered).toBeGreaterThan(runs / 3);
  });

  it("are the search's on image and token networks (convolutions, pools, embeddings)", () => {
    fc.assert(
      fc.property(fc.constantFrom(4, 8), fc.boolean(), fc.constantFrom("max-pool" as const, "average-pool" as const), (channels, twice, poolKind) => {
        const layers: LayerSpec[] = [conv("c0", channels), act("ca0")];
        if (twice) layers.push(conv("c1", channels), act("ca1"));
        layers.push(pool("p0", poolKind, 2), flatten("f0"), dense("out", 4, he, true));
        expect(agrees(makeSpec(layers, { input: image(3, 8, 8), loss: mse() }))?.answered).toBe(true);
        const words = makeSpec([embedding("e0", 50, 8), attention("t0", 2, 4), gated("g0", 16), dense("out", 4, he, true)], { input: tokens(4), loss: mse() });
        expect(agrees(words)?.answered).toBe(true);
      }),
      { numRuns: 8 },
    );
  });

  it("are none for another list: predict's own, or a copy of check's", () => {
    const spec = makeSpec([dense("d0", 8, he, true), act("a0"), dense("d1", 4)], { input: features(8) });
    const graph = built(spec).graph;
    expect(knownWeightPairs(predict(graph, spec).tensors)).toBeUndefined();
    const kept = predictForCheck(graph, spec);
    expect(knownWeightPairs([...kept.tensors])).toBeUndefined();
    expect(knownWeightPairs(kept.tensors)).toHaveLength(3);
  });
});
