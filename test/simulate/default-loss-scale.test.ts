import { readdirSync } from "node:fs";
import { join } from "node:path";
import { describe, expect, it } from "vitest";
import { check, gradientLossScale } from "../../src/check.js";
import { checkedLossScale } from "../../src/cli/simulate.js";
import { shrinkSpec } from "../../src/simulate/index.js";
import { loadSpec, type NetworkSpec } from "../../src/spec/index.js";
import { ROOT } from "../helpers/run.js";

const EXAMPLES = readdirSync(join(ROOT, "specs")).filter((name) => name.endsWith(".yaml"));

async function example(name: string): Promise<NetworkSpec> {
  const loaded = await loadSpec(join(ROOT, "specs", name));
  if (!loaded.ok) throw new Error(`${name}: ${loaded.issues.map((i) => i.message).join("; ")}`);
  return loaded.spec;
}

// what check judges the plan's gradients at: the scale of the format holding them (src/check.ts), the reference here
function checkedScale(spec: NetworkSpec, plan: string): { value: number; origin: string } {
  const result = check(spec, { plan });
  return result.formats.find((f) => f.holds.includes("gradients"))?.lossScale ?? result.lossScale;
}

// simulate's default loss scale is answered by gradientLossScale (the loss-scale answer alone); the reference is a whole
// check of the same spec and plan, whose verdict the simulation is a second opinion on (README, "A second opinion")
describe("gradientLossScale: the scale check judges the gradients at, without the whole check", () => {
  it("gives check's scale and origin for every plan of every example, full size and shrunk as simulate shrinks", async () => {
    let compared = 0;
    let recommended = 0;
    for (const name of EXAMPLES) {
      const full = await example(name);
      for (const spec of [full, shrinkSpec(full, { width: 8 }).spec]) {
        for (const plan of [spec.precision, ...spec.plans]) {
          const light = gradientLossScale(spec, { plan: plan.name });
          const whole = checkedScale(spec, plan.name);
          expect({ value: light.value, origin: light.origin }, `${name}, ${spec === full ? "full size" : "shrunk"}, ${plan.name}`).toEqual({
            value: whole.value,
            origin: whole.origin,
          });
          compared++;
          if (light.origin === "recommended") recommended++;
        }
      }
    }
    // the examples hold binary16 gradients that need a scale: a comparison where every answer is "none" would prove little.
    // Floors invented for the demo: every example full size and shrunk (at least one plan each), and a few recommended
    expect(compared).toBeGreaterThanOrEqual(2 * EXAMPLES.length);
    expect(recommended).toBeGreaterThan(3);
  });

  it("answers as check's own loss-scale answer does, the weighed pick included", async () => {
    const spec = await example("deep-relu-glorot.yaml");
    const light = gradientLossScale(spec);
    const whole = check(spec).lossScaleAnswer;
    expect(light.answer?.window).toEqual(whole?.window);
    expect(light.answer?.pick).toBe(whole?.pick);
    expect(light.answer?.sentences).toEqual(whole?.sentences);
  });

  it("is what simulate runs at by default, with the reason naming check", async () => {
    const spec = await example("wide-classifier.yaml");
    const answer = checkedLossScale(spec)(spec, { plan: spec.precision, shrunk: false });
    // the reference is check itself (checkedScale above); the reason's words are simulate's own (src/cli/simulate.ts)
    expect(answer).toEqual({ value: checkedScale(spec, spec.precision.name).value, origin: "recommended", reason: "recommended by check" });
  });
});
