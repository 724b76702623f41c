import { describe, expect, it } from "vitest";
import { closestWord, didYouMean, didYouMeanFormat } from "../../src/spec/issues.js";
import { formatSpecIssue, formatSpecPath, parseSpec, positionIssues } from "../../src/spec/index.js";

describe("formatSpecPath(path)", () => {
  it("writes list indexes in brackets and keys with dots, as a reader finds them in YAML", () => {
    expect(formatSpecPath(["layers", 3, "head-width"])).toBe("layers[3].head-width");
    expect(formatSpecPath(["blocks", "encoder", 0, "branch", 1])).toBe("blocks.encoder[0].branch[1]");
    expect(formatSpecPath([])).toBe("");
  });

  it("quotes keys that are not plain words", () => {
    expect(formatSpecPath(["measured", "names", "encoder.first weight"])).toBe('measured.names["encoder.first weight"]');
  });
});

describe("formatSpecIssue(issue)", () => {
  it("gives file:line:column: path: message", () => {
    expect(formatSpecIssue({ file: "a.yaml", line: 4, column: 12, path: "layers[1].width", message: "must be at least 1, got 0" })).toBe(
      "a.yaml:4:12: layers[1].width: must be at least 1, got 0",
    );
  });

  it("leaves out an unknown position and an empty path", () => {
    expect(formatSpecIssue({ file: "a.yaml", line: 0, column: 0, path: "", message: "no such file" })).toBe("a.yaml: no such file");
    expect(formatSpecIssue({ file: "a.yaml", line: 1, column: 1, path: "", message: "the spec is empty" })).toBe("a.yaml:1:1: the spec is empty");
  });
});

describe("positionIssues(locate, issues)", () => {
  it("puts each spec path at its key's line and column in the file, the path rendered as formatSpecPath renders it", () => {
    // an invented greenhouse sensor; the second layer's width value sits on line 6 at column 27 (counted by hand,
    // 1-based as editors count them; common practice)
    const text = [
      "name: greenhouse",
      "input: { features: 8 }",
      "training: { batch: 4, loss: { kind: mean-squared-error } }",
      "layers:",
      "  - { type: dense, width: 8 }",
      "  - { type: dense, width: 1, init: he-normal }",
    ].join("\n");
    const parsed = parseSpec(text, "greenhouse.yaml");
    if (!parsed.ok) throw new Error(parsed.issues.map(formatSpecIssue).join("; "));
    const issues = positionIssues(parsed.locate, [
      { path: ["layers", 1, "width"], message: "too narrow" },
      { path: [], message: "the whole document" },
    ]);
    expect(issues[0]).toEqual({ file: "greenhouse.yaml", line: 6, column: 27, path: "layers[1].width", message: "too narrow" });
    expect(issues[1]).toMatchObject({ file: "greenhouse.yaml", path: "", message: "the whole document" });
  });
});

describe("closestWord(word, candidates)", () => {
  it("finds single slips: a swap, a missing or extra letter, a wrong letter", () => {
    expect(closestWord("widht", ["width", "bias", "init"])).toBe("width");
    expect(closestWord("widt", ["width", "bias"])).toBe("width");
    expect(closestWord("biass", ["width", "bias"])).toBe("bias");
    expect(closestWord("heds", ["heads", "head-width"])).toBe("heads");
  });

  it("ignores camelCase versus kebab-case and underscores", () => {
    expect(closestWord("headWidth", ["heads", "head-width"])).toBe("head-width");
    expect(closestWord("warmup_steps", ["warmup-steps", "betas"])).toBe("warmup-steps");
  });

  it("takes the start of a long key for the key", () => {
    expect(closestWord("learning", ["learning-rate", "epsilon"])).toBe("learning-rate");
  });

  it("breaks ties between equally close candidates: the word's own letters first, then the longest shared start, then list order", () => {
    // "binary61": one adjacent swap from binary16, one substitution from binary64 (both distance 1, Damerau 1964)
    expect(closestWord("binary61", ["binary64", "binary16"])).toBe("binary16");
    expect(closestWord("binary61", ["binary16", "binary64"])).toBe("binary16");
    // "e4m2": one substitution from e5m2 and from e4m3; e4m3 shares "e4m"
    expect(closestWord("e4m2", ["binary16", "e5m2", "e4m3"])).toBe("e4m3");
    expect(closestWord("e5m3", ["e4m3", "e5m2"])).toBe("e5m2");
    // a nearer candidate still wins over a tie-break: "e4m" is one letter from e4m3, two from e5m2
    expect(closestWord("e4m", ["e5m2", "e4m3"])).toBe("e4m3");
    // nothing else to tell them apart: the first in the list
    expect(closestWord("wxdth", ["width", "wadth"])).toBe("width");
    expect(closestWord("wxdth", ["wadth", "width"])).toBe("wadth");
  });

  it("didYouMeanFormat: another spelling of a format names it, else the nearest name", () => {
    const names = ["binary16", "bfloat16", "binary32", "binary64", "tf32", "e5m2", "e4m3"];
    expect(didYouMeanFormat("F16", names)).toBe(' (did you mean "binary16"?)');
    expect(didYouMeanFormat("f32", names)).toBe(' (did you mean "binary32"?)');
    expect(didYouMeanFormat("e4m2", names)).toBe(' (did you mean "e4m3"?)');
    // an alias whose format is not among the candidates is no hint
    expect(didYouMeanFormat("double", ["binary16", "bfloat16"])).toBe("");
  });

  it("suggests nothing when nothing is close", () => {
    expect(closestWord("colour", ["width", "bias", "init"])).toBeUndefined();
    expect(didYouMean("colour", ["width"])).toBe("");
    expect(didYouMean("widht", ["width"])).toBe(' (did you mean "width"?)');
  });
});
