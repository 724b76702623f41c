import { readFileSync } from "node:fs";
import { beforeEach, describe, expect, it, vi } from "vitest";
import { check } from "../../src/check.js";
import { FORMAT_NAMES, type FormatName } from "../../src/formats/names.js";
import { predictForCheck } from "../../src/magnitude/predict.js";
import { lossScaleAnswer } from "../../src/scale/recommend.js";
import { parseSpec } from "../../src/spec/index.js";

// check() validates its options (the loss scale, then every format name) in one place before any work: a bad name
// next to a good one fails with the judge's message, and no prediction or loss-scale window search runs first.
vi.mock("../../src/scale/recommend.js", async (importOriginal) => {
  const original = await importOriginal<typeof import("../../src/scale/recommend.js")>();
  return { ...original, lossScaleAnswer: vi.fn(original.lossScaleAnswer) };
});
// check's own prediction (the one it keeps to itself, src/magnitude/predict.ts)
vi.mock("../../src/magnitude/predict.js", async (importOriginal) => {
  const original = await importOriginal<typeof import("../../src/magnitude/predict.js")>();
  return { ...original, predictForCheck: vi.fn(original.predictForCheck) };
});

const parsed = parseSpec(readFileSync("specs/wide-classifier.yaml", "utf8"), "specs/wide-classifier.yaml");
if (!parsed.ok) throw new Error("specs/wide-classifier.yaml does not parse");
const spec = parsed.spec;
// the judge's message for an unknown name (src/risk/judge.ts), with the accepted names
const unknown = (name: string) => `unknown format "${name}"; accepted: ${FORMAT_NAMES.join(", ")}`;

beforeEach(() => {
  vi.mocked(lossScaleAnswer).mockClear();
  vi.mocked(predictForCheck).mockClear();
});

describe("check validates its formats before any work", () => {
  it("a good format searches its window (the spies see the work)", () => {
    check(spec, { formats: ["binary16"] });
    expect(vi.mocked(predictForCheck)).toHaveBeenCalledTimes(1);
    expect(vi.mocked(lossScaleAnswer)).toHaveBeenCalledTimes(1);
  });

  it("nosuchformat,binary16: RangeError with the judge's message; no prediction, no window search", () => {
    expect(() => check(spec, { formats: ["nosuchformat" as FormatName, "binary16"] })).toThrow(new RangeError(unknown("nosuchformat")));
    expect(vi.mocked(predictForCheck)).not.toHaveBeenCalled();
    expect(vi.mocked(lossScaleAnswer)).not.toHaveBeenCalled();
  });

  it("binary16,nosuchformat likewise: the good name first does not start the searches", () => {
    expect(() => check(spec, { formats: ["binary16", "nosuchformat" as FormatName] })).toThrow(unknown("nosuchformat"));
    expect(vi.mocked(lossScaleAnswer)).not.toHaveBeenCalled();
  });

  it("a bad loss scale is still reported before an unknown format", () => {
    expect(() => check(spec, { formats: ["nosuchformat" as FormatName], lossScale: -1 })).toThrow("the loss scale must be a positive finite power of two, got -1");
    expect(vi.mocked(predictForCheck)).not.toHaveBeenCalled();
  });

  // the spec's `loss-scale` and `--loss-scale` take powers of two inside binary32's normal range (a power of two scales
  // exactly: Micikevicius et al. 2018 §3.2; binary32's normal range 2^-126 to 2^127: IEEE 754-2019 Table 3.5): the
  // library takes the same, with the spec's message
  it("a loss scale that is no power of two, or lies outside binary32's normal range, is refused as the spec refuses it", () => {
    expect(() => check(spec, { lossScale: 3 })).toThrow(new RangeError("the loss scale must be a power of two (such as 1024 or 65536), got 3"));
    expect(() => check(spec, { lossScale: 2 ** 200 })).toThrow(/2\^200 is outside binary32's normal range, 2\^-126 to 2\^127/);
    expect(() => check(spec, { lossScale: 2 ** -130 })).toThrow(/2\^-130 is outside binary32's normal range/);
    expect(vi.mocked(predictForCheck)).not.toHaveBeenCalled();
  });
});
