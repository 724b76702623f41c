/**
 * predict's end pass completes the start pass's hazard sites in place, site by site in the order both passes meet them
 * (src/magnitude/predict.ts, Phase.siteEnd). A site paired with another site's end profiles would be judged at the
 * end of the horizon on another layer's numbers: these checks tie each site's end to its own layer's end tensors.
 */
import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { predict } from "../../src/magnitude/index.js";
import { predictForCheck } from "../../src/magnitude/predict.js";
import { analyticRules } from "../../src/ops/registry.js";
import type { Prediction } from "../../src/magnitude/types.js";
import type { LayerSpec, NetworkSpec } from "../../src/spec/types.js";
import { act, dense, features, he, makeSpec, mse } from "./build-spec.js";

function predictOf(spec: NetworkSpec): Prediction {
  const result = buildGraph(spec);
  if (!result.ok) throw new Error(result.issues.map((i) => i.message).join("; "));
  return predict(result.graph, spec);
}

describe("hazard sites at the end of the horizon", () => {
  it("hold their own layer's end numbers (random stacks, workers and accumulation steps)", () => {
    fc.assert(
      fc.property(
        fc.array(fc.constantFrom(8, 32, 96), { minLength: 1, maxLength: 6 }),
        fc.array(fc.boolean(), { minLength: 6, maxLength: 6 }),
        fc.constantFrom(1, 2, 4),
        fc.constantFrom(1, 3),
        fc.constantFrom("average" as const, "sum" as const),
        fc.constantFrom(1, 1.25, 2),
        fc.constantFrom("mean" as const, "sum" as const),
        (widths, biases, workers, steps, combine, growth, reduction) => {
          const layers: LayerSpec[] = [];
          widths.forEach((width, i) => layers.push(dense(`d${i}`, width, he, biases[i] ?? false), act(`a${i}`)));
          const spec = makeSpec(layers, {
            input: features(24),
            loss: mse(1, reduction),
            training: { workers, accumulationSteps: steps, workerGradients: combine, horizon: { steps: 1000, weightGrowth: growth, finalLoss: 0.3 } },
          });
          const p = predictOf(spec);
          const byId = new Map(p.tensors.map((t) => [t.id, t]));
          expect(p.hazards.length).toBeGreaterThan(0);
          for (const site of p.hazards) {
            expect(site.end).toBeDefined();
            if (site.kind === "accumulation" && site.gradient === true) {
              // a backward sum makes a gradient the prediction reports: the dense layer's weight gradient (the one
              // micro-batch's sum, what is reported when nothing is combined), or the gradient at its input, the output
              // gradient of the activation below; its terms count what one element of that gradient sums
              const index = Number(site.layer.slice(1));
              if (site.tensor !== undefined) {
                expect(site.tensor).toBe(`${site.layer}/weight-gradient`);
                expect(site.terms).toBe(32);
                const gradient = byId.get(site.tensor)!;
                if (workers * steps === 1) {
                  expect(site.output!.meanSquare).toBe(gradient.start.meanSquare);
                  expect(site.end!.output!.meanSquare).toBe(gradient.end.meanSquare);
                }
              } else {
                // none below the network's input, where no gradient is computed
                expect(index).toBeGreaterThan(0);
                expect(site.terms).toBe(widths[index]);
                const gradient = byId.get(`a${index - 1}/activation-gradient`)!;
                expect(site.output!.meanSquare).toBe(gradient.start.meanSquare);
                expect(site.end!.output!.meanSquare).toBe(gradient.end.meanSquare);
              }
            } else if (site.kind === "accumulation") {
              // a dense layer's sums are its output: the same profile as its pre-activation tensor, at the end too
              const output = byId.get(`${site.layer}/pre-activation`)!;
              expect(site.output).toBe(output.start);
              expect(site.end!.output).toBe(output.end);
            }
            if (site.kind === "gradient-sum") {
              // the combined gradient is the sum, divided by the worker count when averaged (its definition in the plan)
              const gradient = byId.get(site.tensor!)!;
              const divisor = combine === "average" ? workers * workers : 1;
              expect(gradient.end.meanSquare).toBe(site.end!.output!.meanSquare! / divisor);
              expect(gradient.start.meanSquare).toBe(site.output!.meanSquare! / divisor);
            }
            if (site.kind === "loss-value") {
              const loss = byId.get("loss/loss")!;
              expect(site.end!.output!.rms).toBe(loss.end.rms);
            }
          }
        },
      ),
      { numRuns: 40 },
    );
  });

  it("leave every tensor its own profiles and shape, so an edit made in place moves one tensor only", () => {
    // layers of one width and initialisation have equal numbers: still one profile object each (a caller adjusting a
    // prediction before judging it, as judgePrediction allows, edits one tensor)
    const layers: LayerSpec[] = [];
    for (let i = 0; i < 4; i++) layers.push(dense(`d${i}`, 32, he, true), act(`a${i}`));
    const spec = makeSpec(layers, { input: features(32), training: { horizon: { steps: 1000, weightGrowth: 1.5 } } });
    const p = predictOf(spec);
    const profiles = new Set<object>();
    const shapes = new Set<object>();
    for (const t of p.tensors) {
      expect(profiles.has(t.start) || profiles.has(t.end)).toBe(false);
      profiles.add(t.start);
      profiles.add(t.end);
      if (t.role === "activation" || t.role === "pre-activation" || t.role === "activation-gradient") {
        expect(shapes.has(t.shape)).toBe(false);
        shapes.add(t.shape);
      }
    }
    const weights = p.tensors.filter((t) => t.id === "d1/weight" || t.id === "d2/weight");
    expect(weights[0]!.start).toEqual(weights[1]!.start);
    weights[0]!.start.rms *= 2;
    expect(weights[1]!.start.rms).toBe(weights[0]!.start.rms / 2);
  });

  it("in check's own prediction, where like weights share one profile, are the numbers predict gives each tensor", () => {
    // predictForCheck reuses a weight's profile where the last weight at its place had the same variance and size (and
    // the start pass's at the end where weights do not grow): every tensor and site must read as predict's own
    fc.assert(
      fc.property(
        fc.array(fc.constantFrom(8, 32), { minLength: 1, maxLength: 5 }),
        fc.array(fc.boolean(), { minLength: 5, maxLength: 5 }),
        fc.constantFrom(1, 1.5),
        (widths, biases, weightGrowth) => {
          const layers: LayerSpec[] = [];
          widths.forEach((width, i) => layers.push(dense(`d${i}`, width, he, biases[i]), act(`a${i}`)));
          const spec = makeSpec(layers, { input: features(32), training: { horizon: { steps: 1000, weightGrowth } } });
          const built = buildGraph(spec);
          if (!built.ok) throw new Error("does not build");
          const own = predict(built.graph, spec);
          const kept = predictForCheck(built.graph, spec);
          expect(JSON.stringify(kept.hazards)).toBe(JSON.stringify(own.hazards));
          // each site's end record is its own (predict.ts newSite makes it with the site and the end pass writes into it);
          // where the end pass takes the start's forward, a forward sum's end holds the start's very profiles, which the
          // judgement tells by identity (src/risk/hazards.ts judgesEnd)
          expect(new Set(kept.hazards.map((site) => site.end)).size).toBe(kept.hazards.length);
          for (const site of kept.hazards) {
            if (weightGrowth !== 1 || site.kind !== "accumulation" || site.gradient === true) continue;
            expect(site.end!.input).toBe(site.input);
            expect(site.end!.output).toBe(site.output);
          }
          expect(JSON.stringify(kept.tensors)).toBe(JSON.stringify(own.tensors, (key, value: unknown) => (key === "ledger" ? undefined : value)));
        },
      ),
      { numRuns: 30 },
    );
  });

  it("are paired by kind and layer: an end pass that sites otherwise is an internal error, not another site's end", () => {
    // a dense rule that, at the end only, reports its sums as a norm's: the end pass meets a site of another kind
    const spec = makeSpec([dense("d0", 16), act("a0"), dense("d1", 16), act("a1")], { input: features(16) });
    const rule = analyticRules.dense;
    const forward = rule.forward;
    rule.forward = (ctx, layer, input, branch) => {
      const result = forward(ctx, layer, input, branch);
      if (ctx.phase !== "end" || layer.name !== "d1") return result;
      return { ...result, hazards: result.hazards.map((h) => ({ ...h, kind: "norm-sum-of-squares" as const })) };
    };
    try {
      expect(() => predictOf(spec)).toThrow(/internal: start and end passes disagree at hazard site 1: accumulation of d1 at the start, norm-sum-of-squares of d1 at the end/);
      // one site fewer at the end: the start pass's last site is left without its end
      rule.forward = (ctx, layer, input, branch) => {
        const result = forward(ctx, layer, input, branch);
        return ctx.phase === "end" && layer.name === "d1" ? { ...result, hazards: [] } : result;
      };
      // (the next site met is d1's first backward sum, of the same kind and layer: told apart as a backward one)
      expect(() => predictOf(spec)).toThrow(/internal: start and end passes disagree at hazard site 1: accumulation of d1 at the start, accumulation \(backward\) of d1 at the end/);
    } finally {
      rule.forward = forward;
    }
    expect(predictOf(spec).hazards.every((site) => site.end !== undefined)).toBe(true);
  });
});
