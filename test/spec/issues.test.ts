import { describe, expect, it } from "vitest";
import { closestWord, didYouMean } from "../../src/spec/issues.js";
import { formatSpecIssue, formatSpecPath } from "../../src/spec/index.js";

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

  it("suggests nothing when nothing is close", () => {
    expect(closestWord("colour", ["width", "bias", "init"])).toBeUndefined();
    expect(didYouMean("colour", ["width"])).toBe("");
    expect(didYouMean("widht", ["width"])).toBe(' (did you mean "width"?)');
  });
});
