/** The list parser of src/cli/lists.ts, called directly, and simulate's --shrink list built on it. */
import { describe, expect, it } from "vitest";
import { UserError } from "../../src/cli/errors.js";
import { parseFormatList, splitList } from "../../src/cli/lists.js";
import { parseShrink } from "../../src/cli/simulate.js";
import { getFormat } from "../../src/formats/index.js";
import { FORMAT_ALIASES } from "../../src/formats/names.js";
import { parseSpec } from "../../src/spec/index.js";

const ACCEPTED = "accepted: binary16, bfloat16, binary32, binary64, tf32, e5m2, e4m3 (comma-separated)";

/** The message of the UserError `run` throws (and fails if it throws anything else, or nothing). */
function userError(run: () => unknown): string {
  try {
    run();
  } catch (error) {
    expect(error).toBeInstanceOf(UserError);
    // an input error (DEVELOPERS.md, "Exit codes")
    expect((error as UserError).exitCode).toBe(2);
    return (error as UserError).message;
  }
  throw new Error("expected a UserError");
}

describe("splitList", () => {
  it("splits on commas, trims, and joins repeated options in the order given", () => {
    expect(splitList("--x", " a , b", "item", "hint")).toEqual(["a", "b"]);
    expect(splitList("--x", ["a,b", "c"], "item", "hint")).toEqual(["a", "b", "c"]);
  });

  it("refuses empty items and empty lists, naming the option and ending with the hint", () => {
    expect(userError(() => splitList("--x", "a,,b", "item", "hint"))).toBe('--x: empty item in "a,,b"; hint');
    expect(userError(() => splitList("--x", ["a", "b,"], "item", "hint"))).toBe('--x: empty item in "b,"; hint');
    expect(userError(() => splitList("--x", "  ", "item", "hint"))).toBe("--x: no item given; hint");
    expect(userError(() => splitList("--x", [], "item", "hint"))).toBe("--x: no item given; hint");
  });
});

describe("parseFormatList", () => {
  it("reads names and aliases, case-insensitive, into format records in the order first named", () => {
    // aliases as getFormat documents them: fp16 → binary16, bf16 → bfloat16 (src/formats/model.ts)
    const formats = parseFormatList("--to", ["E4M3, fp16", "bf16"]);
    expect(formats.map((f) => f.name)).toEqual(["e4m3", "binary16", "bfloat16"]);
    // binary16's largest finite value, IEEE 754-2019 Table 3.5: the records are the model's, not copies of names
    expect(formats[1]?.maxFinite).toBe(65504);
  });

  it("counts a format named twice once, by name or by alias", () => {
    expect(parseFormatList("--to", "binary16,e4m3,fp16,half,E4M3").map((f) => f.name)).toEqual(["binary16", "e4m3"]);
  });

  it("names the nearest known format for a likely typo, and none when nothing is close", () => {
    // one substitution, one adjacent swap, one insertion away (Damerau 1964 edit distance)
    expect(userError(() => parseFormatList("--format", "binary61"))).toBe(`--format: unknown format "binary61" (did you mean "binary16"?); ${ACCEPTED}`);
    expect(userError(() => parseFormatList("--format", "TF23"))).toBe(`--format: unknown format "TF23" (did you mean "tf32"?); ${ACCEPTED}`);
    expect(userError(() => parseFormatList("--format", "binary3"))).toBe(`--format: unknown format "binary3" (did you mean "binary32"?); ${ACCEPTED}`);
    expect(userError(() => parseFormatList("--format", "int8"))).toBe(`--format: unknown format "int8"; ${ACCEPTED}`);
  });

  it("one alias table: an accepted alias is taken, an alias only suggested is refused with the hint a spec gets", () => {
    // a spec takes the canonical names alone (specs/README.md, "Precision plans"): every alias is a hint there
    const spec = (format: string) =>
      `input: { features: 4 }\ntraining:\n  batch: 2\n  loss: { kind: cross-entropy, classes: 2 }\nprecision: { activations: ${format} }\nlayers:\n  - { type: dense, width: 2 }\n`;
    for (const [alias, { format, accepted }] of Object.entries(FORMAT_ALIASES)) {
      const parsed = parseSpec(spec(alias), "a.yaml");
      expect(parsed.ok, alias).toBe(false);
      const specMessage = parsed.ok ? "" : (parsed.issues[0]?.message ?? "");
      expect(specMessage, alias).toContain(` (did you mean "${format}"?)`);
      if (accepted) {
        expect(parseFormatList("--to", alias.toUpperCase()).map((f) => f.name), alias).toEqual([format]);
      } else {
        expect(() => getFormat(alias), alias).toThrow(RangeError);
        expect(userError(() => parseFormatList("--format", alias)), alias).toBe(`--format: unknown format "${alias}" (did you mean "${format}"?); ${ACCEPTED}`);
      }
    }
    // the spellings README promises the command line takes, and one it only suggests
    expect(FORMAT_ALIASES["fp16"]?.accepted && FORMAT_ALIASES["bf16"]?.accepted && FORMAT_ALIASES["fp32"]?.accepted).toBe(true);
    expect(FORMAT_ALIASES["f16"]).toEqual({ format: "binary16", accepted: false });
    // a name inherited from Object.prototype is no alias
    expect(() => getFormat("constructor")).toThrow(RangeError);
  });

  it("reports the first problem in the order given", () => {
    expect(userError(() => parseFormatList("--to", "fp12,,e4m3"))).toBe(`--to: empty item in "fp12,,e4m3"; ${ACCEPTED}`);
    expect(userError(() => parseFormatList("--to", "fp12,e4m9"))).toMatch(/^--to: unknown format "fp12"/);
  });
});

describe("simulate --shrink, read as a list", () => {
  it("keeps its own items (key=N) and the single factor", () => {
    expect(parseShrink("width=2, batch=4")).toEqual({ width: 2, batch: 4 });
    // one factor for widths, batch and positions (simulate --help, --shrink)
    expect(parseShrink("3")).toEqual({ width: 3, batch: 3, positions: 3 });
  });

  it("refuses an empty item, as every list does, and a key given twice (the factors may differ)", () => {
    expect(userError(() => parseShrink("width=2,"))).toMatch(/^--shrink: empty item in "width=2,"; expected a factor such as 4/);
    expect(userError(() => parseShrink("width=2,width=4"))).toBe('--shrink "width=2,width=4": width is given twice; give each factor once');
  });
});
