/**
 * The refusal of a simulation too large for --memory names the memory it would need and the limit with enough digits
 * to tell them apart: "about 4.0 GiB of memory, more than the limit of 4.0 GiB" contradicts itself.
 */
import { describe, expect, it } from "vitest";
import { buildGraph } from "../../src/graph/index.js";
import { loadSpec } from "../../src/spec/index.js";
import { checkMemory, estimateMemory } from "../../src/simulate/shrink.js";

describe("a simulation just above the memory limit", () => {
  it.each([1, 2 ** 10, 2 ** 20, 2 ** 27])("%d bytes above it: the two amounts differ as written, the need the larger", async (above) => {
    const loaded = await loadSpec("specs/deep-relu-he.yaml");
    if (!loaded.ok) throw new Error("the example spec should load");
    const built = buildGraph(loaded.spec);
    if (!built.ok) throw new Error("the example network should build");
    const need = estimateMemory(built.graph, 0);
    let message = "";
    try {
      checkMemory(loaded.spec, built.graph, 0, need - above, false);
    } catch (error) {
      message = (error as Error).message;
    }
    const [, needText = "", limitText = ""] = /would need about ([\d.]+) GiB of memory, more than the limit of ([\d.]+) GiB/.exec(message) ?? [];
    expect(needText).not.toBe("");
    expect(needText).not.toBe(limitText);
    expect(Number(needText)).toBeGreaterThan(Number(limitText));
  });
});
