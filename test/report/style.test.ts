import { describe, expect, test } from "vitest";
import { colorEnabled, createStyle, PLAIN } from "../../src/report/style.js";

describe("colorEnabled (NO_COLOR / FORCE_COLOR conventions, common practice)", () => {
  test("on for a terminal with no variables set", () => {
    expect(colorEnabled({ isTTY: true }, {})).toBe(true);
  });
  test("off for a pipe or file", () => {
    expect(colorEnabled({ isTTY: false }, {})).toBe(false);
    expect(colorEnabled({}, {})).toBe(false);
  });
  test("NO_COLOR turns it off on a terminal; an empty NO_COLOR does not", () => {
    expect(colorEnabled({ isTTY: true }, { NO_COLOR: "1" })).toBe(false);
    expect(colorEnabled({ isTTY: true }, { NO_COLOR: "" })).toBe(true);
  });
  test("FORCE_COLOR turns it on for a pipe and wins over NO_COLOR; FORCE_COLOR=0 turns it off", () => {
    expect(colorEnabled({ isTTY: false }, { FORCE_COLOR: "1" })).toBe(true);
    expect(colorEnabled({ isTTY: false }, { FORCE_COLOR: "" })).toBe(true);
    expect(colorEnabled({ isTTY: true }, { FORCE_COLOR: "1", NO_COLOR: "1" })).toBe(true);
    expect(colorEnabled({ isTTY: true }, { FORCE_COLOR: "0" })).toBe(false);
    expect(colorEnabled({ isTTY: true }, { FORCE_COLOR: "false" })).toBe(false);
  });
});

describe("createStyle", () => {
  test("a disabled style returns text unchanged", () => {
    expect(createStyle(false).role("fails", "fails")).toBe("fails");
    expect(PLAIN.paint("red", "x")).toBe("x");
    expect(PLAIN.enabled).toBe(false);
  });
  test("an enabled style colours even though the test's stdout is not a terminal", () => {
    const style = createStyle(true);
    // SGR 31 = red foreground, 1 = bold (ECMA-48 §8.3.117)
    expect(style.role("fails", "x")).toBe("\x1b[31m\x1b[1mx\x1b[22m\x1b[39m");
    expect(style.paint(["green"], "ok")).toBe("\x1b[32mok\x1b[39m");
    expect(style.role("muted", "")).toBe("");
  });
});
