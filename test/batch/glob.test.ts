import { describe, expect, test } from "vitest";
import { globBase, globToRegExp, hasGlob } from "../../src/batch/glob.js";

// Expected matches follow the shell's pathname expansion (POSIX.1-2017 XCU §2.13.3: a slash is
// matched only by a slash) with the common "**" extension for any number of folders (common practice).
describe("globToRegExp", () => {
  const cases: [string, string, boolean][] = [
    ["*.yaml", "net.yaml", true],
    ["*.yaml", "sub/net.yaml", false],
    ["specs/*.yaml", "specs/net.yaml", true],
    ["specs/?.yaml", "specs/a.yaml", true],
    ["specs/?.yaml", "specs/ab.yaml", false],
    ["specs/**/*.yaml", "specs/net.yaml", true],
    ["specs/**/*.yaml", "specs/a/b/c/net.yaml", true],
    ["specs/**/*.yaml", "other/net.yaml", false],
    ["specs/**", "specs/a/b.yaml", true],
    ["**/*.yml", "deep/er/x.yml", true],
    ["net.(1).yaml", "net.(1).yaml", true],
    ["net.yaml", "netXyaml", false],
    ["a*b*.yaml", "a-1-b-2.yaml", true],
    ["a**b.yaml", "a/x/b.yaml", false],
  ];
  test.each(cases)("%s against %s is %s", (pattern, path, expected) => {
    expect(globToRegExp(pattern).test(path)).toBe(expected);
  });
  test("refuses an empty pattern", () => {
    expect(() => globToRegExp("")).toThrow(TypeError);
  });
});

describe("globBase", () => {
  test("splits at the first segment with a wildcard", () => {
    expect(globBase("specs/**/*.yaml")).toEqual({ base: "specs", rest: "**/*.yaml" });
    expect(globBase("*.yaml")).toEqual({ base: ".", rest: "*.yaml" });
    expect(globBase("/tmp/x/*.yml")).toEqual({ base: "/tmp/x", rest: "*.yml" });
    expect(globBase("/*.yml")).toEqual({ base: "/", rest: "*.yml" });
  });
  test("hasGlob", () => {
    expect(hasGlob("a/*.yaml")).toBe(true);
    expect(hasGlob("a/?.yaml")).toBe(true);
    expect(hasGlob("a/b.yaml")).toBe(false);
  });
});
