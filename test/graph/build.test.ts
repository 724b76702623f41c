import { describe, expect, test } from "vitest";
import { buildGraph, convSize, describeShape, forwardOrder } from "../../src/graph/index.js";
import type { Graph, GraphResult } from "../../src/graph/index.js";
import { check, CheckInputError } from "../../src/index.js";
import {
  act,
  attention,
  conv,
  crossEntropy,
  dense,
  embedding,
  features,
  flatten,
  gated,
  glorot,
  image,
  makeSpec,
  norm,
  pool,
  repeat,
  residual,
  tokens,
  use,
} from "../magnitude/build-spec.js";

function ok(result: GraphResult): Graph {
  if (!result.ok) throw new Error(result.issues.map((i) => `${i.path.join(".")}: ${i.message}`).join("\n"));
  return result.graph;
}

function issues(result: GraphResult): { path: string; message: string }[] {
  if (result.ok) throw new Error("expected issues");
  return result.issues.map((i) => ({ path: i.path.join("."), message: i.message }));
}

describe("buildGraph expands blocks and repeats", () => {
  test("repeat of a block gives dotted unique names in forward order", () => {
    const spec = makeSpec([embedding("embed", 1000, 64), repeat("encoder", 4, [residual("attention", [norm("norm"), attention("self", 4, 16)]), residual("mlp", [norm("norm"), gated("ff", 256)])]), norm("final"), dense("head", 1000)], {
      input: tokens(128),
      loss: crossEntropy(1000),
    });
    const graph = ok(buildGraph(spec));
    const names = forwardOrder(graph).map((l) => l.name);
    expect(names).toContain("encoder.3.attention");
    expect(names).toContain("encoder.3.attention.self");
    expect(names).toContain("encoder.0.mlp.ff");
    expect(new Set(names).size).toBe(names.length);
    // the residual add comes after its branch
    expect(names.indexOf("encoder.3.attention.self")).toBeLessThan(names.indexOf("encoder.3.attention"));
    expect(graph.layerCount).toBe(names.length);
    expect(forwardOrder(graph).map((l) => l.index)).toEqual(names.map((_, i) => i));
  });

  test("use expands a named block; its layers keep the block's spec paths", () => {
    const block = [dense("inner", 32), act("relu")];
    const spec = makeSpec([use("first", "pair"), use("second", "pair"), dense("out", 1)], { blocks: { pair: block } });
    const graph = ok(buildGraph(spec));
    expect(graph.layers.map((l) => l.name)).toEqual(["first.inner", "first.relu", "second.inner", "second.relu", "out"]);
    expect(graph.layers[0]?.path).toEqual(block[0]?.path);
  });

  test("an unknown block and a block that uses itself are reported at the use", () => {
    const missing = use("x", "nowhere");
    expect(issues(buildGraph(makeSpec([missing, dense("out", 1)])))[0]).toMatchObject({ path: missing.path.join("."), message: expect.stringContaining('"nowhere" is not defined') });
    const loop = use("again", "loop");
    const found = issues(buildGraph(makeSpec([use("start", "loop")], { blocks: { loop: [dense("d", 8), loop] } })));
    expect(found[0]?.message).toContain("uses itself");
  });

  // a spec built in code has plain objects for its blocks: the names of Object.prototype's members (ECMAScript
  // 2022 §20.1.3, from memory) are not blocks, and get the unknown block's error (at the use, naming the defined blocks)
  test.each(["toString", "constructor", "hasOwnProperty", "valueOf", "__proto__"])("a use of %s, a member of every object, is an unknown block", (name) => {
    const missing = use("x", name);
    const spec = makeSpec([missing, dense("out", 1)], { blocks: { pair: [dense("inner", 8)] } });
    const found = issues(buildGraph(spec));
    expect(found[0]).toEqual({ path: missing.path.join("."), message: `block "${name}" is not defined (blocks: pair)` });
    // and the same issues as a name no object has
    const unknown = issues(buildGraph(makeSpec([use("x", "nowhere"), dense("out", 1)], { blocks: { pair: [dense("inner", 8)] } })));
    expect(found.map((i) => i.message)).toEqual(unknown.map((i) => i.message.replace('"nowhere"', JSON.stringify(name))));
    // the library's check says the same, as CheckInputError
    expect(() => check(spec)).toThrow(CheckInputError);
    expect(() => check(spec)).toThrow(`block "${name}" is not defined (blocks: pair)`);
    const none = makeSpec([use("x", name), dense("out", 1)]);
    expect(issues(buildGraph(none))[0]?.message).toBe(`block "${name}" is not defined (the spec has no blocks)`);
  });

  test("two layers with one name are refused", () => {
    const found = issues(buildGraph(makeSpec([dense("same", 8), dense("same", 1)])));
    expect(found[0]?.message).toContain('"same" is used twice');
  });

  test("a layer of the spec met again by a repeat is told once, with the count of the others", () => {
    const spec = makeSpec([repeat("stack", 64, [residual("block", [dense("widen", 16)])]), dense("head", 1)], { input: features(8, 1) });
    const found = issues(buildGraph(spec));
    expect(found.map((f) => f.message)).toEqual([
      "stack.0.block: the residual branch turns 1 position × 8 features into 1 position × 16 features; a branch must keep " +
        "the shape so it can be added back (the same in 63 more repeats or uses of this layer)",
    ]);
  });

  test("every problem of a spec is told at once: the walk goes on after a problem whose next shape is known", () => {
    // a residual whose branch widens (the walk goes on with the skip's shape), a name used twice, a dense on an image
    // (taken as if flattened) and a loss whose classes do not match the last layer: four problems, one report
    const spec = makeSpec(
      [residual("block", [dense("widen", 16), act("relu")]), dense("same", 8), dense("same", 8), dense("head", 3)],
      { input: features(8, 1), loss: crossEntropy(4) },
    );
    const found = issues(buildGraph(spec));
    expect(found.map((f) => f.message)).toEqual([
      "block: the residual branch turns 1 position × 8 features into 1 position × 16 features; a branch must keep the shape so it can be added back",
      'same: the name "same" is used twice; give the layers distinct names',
      "cross-entropy has 4 classes but the last layer gives 3 features",
    ]);
    // one of a thing is singular in every message that counts it
    expect(describeShape({ layout: "features", positions: 1, features: 1 })).toBe("1 position × 1 feature");
    expect(describeShape({ layout: "tokens", positions: 1 })).toBe("1 token id");
    const onImage = issues(buildGraph(makeSpec([conv("c", 2, 3), dense("d", 5), dense("head", 3)], { input: image(1, 6, 6), loss: crossEntropy(4) })));
    expect(onImage.map((f) => f.message)).toEqual([
      "d: dense needs a features input (positions × features), got image 2 × 6 × 6; add a flatten first",
      "cross-entropy has 4 classes but the last layer gives 3 features",
    ]);
  });
});

describe("buildGraph tracks shapes, fans and weights", () => {
  test("dense: fan-in, fan-out, weight shape [out, in], He variance 2/fan_in (He et al. 2015)", () => {
    const graph = ok(buildGraph(makeSpec([dense("a", 256, undefined, true), dense("b", 1, glorot)], { input: features(128, 10) })));
    const [a, b] = graph.layers;
    expect(a?.output).toEqual({ layout: "features", positions: 10, features: 256 });
    expect(a?.fanIn).toBe(128);
    expect(a?.fanOut).toBe(256);
    expect(a?.weights.map((w) => [w.name, w.shape])).toEqual([["weight", [256, 128]], ["bias", [256]]]);
    expect(a?.weights[0]?.variance).toBeCloseTo(2 / 128, 15);
    // Glorot & Bengio 2010: 2/(n_in + n_out)
    expect(b?.weights[0]?.variance).toBeCloseTo(2 / (256 + 1), 15);
  });

  test("conv2d output size floor((n + 2p − k)/s) + 1, 'same' = ceil(n/s) (common practice)", () => {
    expect(convSize(32, 3, 1, "same")).toBe(32);
    expect(convSize(32, 3, 2, "same")).toBe(16);
    expect(convSize(32, 3, 1, "valid")).toBe(30);
    expect(convSize(224, 7, 2, 3)).toBe(112);
    const graph = ok(buildGraph(makeSpec([conv("c1", 16, 3, 1, "same"), conv("c2", 32, 3, 2, 1), pool("p", "max-pool", 2), flatten("f"), dense("out", 10)], { input: image(3, 32, 32), loss: crossEntropy(10) })));
    const [c1, c2, p, f] = graph.layers;
    expect(c1?.output).toEqual({ layout: "image", channels: 16, height: 32, width: 32 });
    expect(c1?.fanIn).toBe(27);
    expect(c1?.fanOut).toBe(144);
    expect(c1?.weights[0]?.shape).toEqual([16, 3, 3, 3]);
    expect(c2?.output).toEqual({ layout: "image", channels: 32, height: 16, width: 16 });
    expect(p?.output).toEqual({ layout: "image", channels: 32, height: 8, width: 8 });
    expect(f?.output).toEqual({ layout: "features", positions: 1, features: 2048 });
  });

  test("attention lists query, key, value and output; gated feed-forward lists gate, up and down", () => {
    const graph = ok(buildGraph(makeSpec([attention("att", 8, 32), gated("ff", 1024)], { input: features(512, 64) })));
    const [att, ff] = graph.layers;
    expect(att?.weights.map((w) => `${w.name}:${w.shape.join("x")}`)).toEqual(["query:256x512", "key:256x512", "value:256x512", "output:512x256"]);
    expect(att?.output).toEqual(att?.input);
    expect(ff?.weights.map((w) => `${w.name}:${w.shape.join("x")}`)).toEqual(["gate:1024x512", "up:1024x512", "down:512x1024"]);
  });

  test("norms carry a constant gain (and a zero bias, except rms-norm)", () => {
    const graph = ok(buildGraph(makeSpec([norm("ln", "layer-norm", 2), norm("rms", "rms-norm"), dense("out", 1)])));
    expect(graph.layers[0]?.weights.map((w) => [w.name, w.distribution, w.value ?? 0])).toEqual([["gain", "constant", 2], ["bias", "zeros", 0]]);
    expect(graph.layers[1]?.weights.map((w) => w.name)).toEqual(["gain"]);
  });
});

describe("buildGraph reports shape errors with the spec path", () => {
  test("a residual branch that changes the width", () => {
    const block = residual("block", [dense("wider", 128)]);
    const found = issues(buildGraph(makeSpec([block, dense("out", 1)])));
    expect(found[0]?.path).toBe(block.path.join("."));
    expect(found[0]?.message).toContain("64 features into 1 position × 128 features");
  });

  test("conv2d after flatten, and conv2d on features input", () => {
    const c = conv("late", 8);
    const found = issues(buildGraph(makeSpec([flatten("f"), c], { input: image(3, 8, 8) })));
    expect(found[0]).toMatchObject({ path: c.path.join("."), message: expect.stringContaining("conv2d needs an image input") });
    expect(found[0]?.message).toContain("a flatten or dense earlier turned the image into features");
    const c2 = conv("c", 8);
    const onFeatures = issues(buildGraph(makeSpec([c2])));
    expect(onFeatures[0]?.path).toBe(c2.path.join("."));
    // no layer came before it: the input itself is features
    expect(onFeatures[0]?.message).not.toContain("earlier");
    expect(onFeatures[0]?.message).toContain("describe the input as an image");
  });

  test("token input needs an embedding first, and an embedding cannot come later", () => {
    const first = dense("d", 8);
    expect(issues(buildGraph(makeSpec([first], { input: tokens(16) })))[0]).toMatchObject({ path: first.path.join("."), message: expect.stringContaining("embedding first") });
    const late = embedding("e", 100, 8);
    expect(issues(buildGraph(makeSpec([dense("d", 8), late])))[0]).toMatchObject({ path: late.path.join("."), message: expect.stringContaining("needs token input") });
  });

  test("cross-entropy classes must equal the final width", () => {
    const found = issues(buildGraph(makeSpec([dense("out", 10)], { loss: crossEntropy(12) })));
    expect(found[0]).toEqual({ path: "training.loss.classes", message: "cross-entropy has 12 classes but the last layer gives 10 features" });
  });

  test("absurd sizes (more than 1e12 elements in a tensor) are questioned", () => {
    const huge = dense("huge", 2_000_000);
    const found = issues(buildGraph(makeSpec([dense("wide", 1_000_000), huge, dense("out", 1)])));
    expect(found.some((i) => i.path === huge.path.join(".") && i.message.includes("is a size wrong?"))).toBe(true);
  });

  test("a window or kernel too large for the image", () => {
    const p = pool("p", "average-pool", 9);
    expect(issues(buildGraph(makeSpec([p], { input: image(1, 4, 4) })))[0]?.path).toBe(p.path.join("."));
  });

  test("a shape error in the first layer is the only issue: the network is not also said to have no layers", () => {
    const block = residual("block", [dense("narrower", 32)]);
    expect(issues(buildGraph(makeSpec([block, dense("out", 1)])))).toEqual([
      { path: block.path.join("."), message: expect.stringContaining("64 features into 1 position × 32 features") },
    ]);
    const p = pool("p", "max-pool", 9);
    expect(issues(buildGraph(makeSpec([p, flatten("f"), dense("out", 1)], { input: image(1, 4, 4) })))).toHaveLength(1);
  });
});
