/**
 * A mean-reduced loss sums its terms before it divides: that sum, held in the accumulate format, is judged for overflow,
 * and for the stall of a sequential sum of positive terms once half its ulp passes a term (src/risk/hazards.ts lossValue).
 */
import { f16round } from "@petamoriken/float16";
import { describe, expect, it } from "vitest";
import { evaluateHazard } from "../../src/risk/index.js";
import { context, profile, site } from "./hazard-sites.js";
import { BINARY16, BINARY32 } from "./limits.js";

const TERM = 9.78;
const TERMS = 32768;

function judged(accumulate = BINARY16) {
  return evaluateHazard(
    site({ kind: "loss-value", layer: "loss", terms: 1, averaged: TERMS, input: profile({ shape: "constant", rms: TERM }) }),
    context({ activations: BINARY32, accumulate }),
    "training setup",
  );
}

describe("a mean-reduced loss summed in the accumulate format", () => {
  it("judges the sum before the division: 32768 terms of 9.78 pass binary16's overflow threshold 65520 (IEEE 754-2019 Table 3.5)", () => {
    const sum = judged().evaluations.find((e) => e.measure === "overflow-risk" && e.heldIn === "accumulate" && e.sentence.includes("before it divides"));
    expect(sum?.value).toBe(1);
    expect(sum?.verdict).toBe("fails");
    expect(judged(BINARY32).evaluations.find((e) => e.sentence.includes("before it divides"))?.value).toBe(0);
  });

  it("judges the stall of a sequential sum against a binary16 sum made with f16round", () => {
    // each addition rounded to binary16 (IEEE 754-2019 §4.3), by @petamoriken/float16's f16round
    let sum = 0;
    for (let i = 0; i < TERMS; i++) sum = f16round(sum + f16round(TERM));
    expect(sum).toBe(32768);
    const measured = 1 - sum / (TERMS * TERM);
    const error = judged().evaluations.find((e) => e.measure === "relative-error");
    expect(Math.abs((error?.value ?? 0) - measured)).toBeLessThan(0.01);
    expect(error?.verdict).toBe("fails");
    expect(error?.sentence).toContain("once a sequential sum passes 32768");
    // binary32 does not stall before 9.78·2^24: √n·u alone, √32768·2^-24 (C limits' FLT_EPSILON/2)
    expect(judged(BINARY32).evaluations.find((e) => e.measure === "relative-error")?.value).toBe(Math.sqrt(TERMS) * 2 ** -24);
  });
});
