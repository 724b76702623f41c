import { describe, expect, it } from "vitest";
import { check, measuredNetwork } from "../../src/check.js";
import type { NetworkSpec } from "../../src/spec/types.js";

// A library caller's wrong argument gets a TypeError that names what check needs and what it got (README, "Library"),
// not a property read failing deep inside.
describe("check and measuredNetwork refuse what is not a loaded spec", () => {
  for (const [label, value] of [["undefined", undefined], ["null", null], ["a string", "specs/deep-relu-he.yaml"], ["an array", []], ["the load result", { ok: true, spec: {} }]] as const) {
    it(label, () => {
      expect(() => check(value as unknown as NetworkSpec)).toThrow(TypeError);
      expect(() => check(value as unknown as NetworkSpec)).toThrow(/^check needs a network spec as loadSpec or parseSpec give it \(its \.spec\), got /);
      expect(() => measuredNetwork(value as unknown as NetworkSpec, undefined)).toThrow(/^measuredNetwork needs a network spec/);
    });
  }
});
