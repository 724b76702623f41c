import { describe, expect, test } from "vitest";
import { styleText } from "node:util";
import { isNumberLike, renderTable, visibleWidth } from "../../src/report/table.js";

describe("renderTable", () => {
  test("aligns columns, right-aligns numbers and draws a rule", () => {
    const text = renderTable(
      [{ title: "tensor" }, { title: "risk" }, { title: "binades" }],
      [
        ["fc1.out", "3.2e-5", 12.5],
        ["attention.logits", "1", -3],
      ],
    );
    expect(text).toBe(
      [
        "tensor              risk  binades",
        "────────────────  ──────  ───────",
        "fc1.out           3.2e-5     12.5",
        "attention.logits       1       -3",
        "",
      ].join("\n"),
    );
  });
  test("measures width without colour escapes", () => {
    const red = styleText("red", "fails", { validateStream: false });
    const text = renderTable([{ title: "verdict" }, { title: "n" }], [[red, 1], ["fits", 22]]);
    const lines = text.split("\n").filter(Boolean);
    const widths = lines.map((line) => visibleWidth(line));
    expect(widths[2]).toBe(widths[3]);
    expect(text).toContain(red);
  });
  test("has no trailing spaces and pads short rows", () => {
    const text = renderTable([{ title: "a" }, { title: "b" }], [["x"], ["longer", "y"]]);
    for (const line of text.split("\n")) expect(line).toBe(line.trimEnd());
  });
  test("honours explicit alignment, maxWidth, indent, gap and noHeader", () => {
    const text = renderTable([{ title: "n", align: "left" }, { title: "name", maxWidth: 5 }], [[1, "abcdefgh"]], {
      indent: "  ",
      gap: 1,
      noHeader: true,
    });
    expect(text).toBe("  1 abcd…\n");
  });
  test("cut: middle keeps both ends, so ids that differ only at the end stay apart", () => {
    const ids = ["repeat-1.0.residual-1.gated-feed-forward-1", "repeat-1.0.residual-1.gated-feed-forward-2"];
    const lines = renderTable([{ title: "layer", maxWidth: 20, cut: "middle" }], ids.map((id) => [id]), { noHeader: true }).split("\n");
    expect(lines.slice(0, 2)).toEqual(["repeat-…ed-forward-1", "repeat-…ed-forward-2"]);
    // the default still cuts at the end
    expect(renderTable([{ title: "layer", maxWidth: 20 }], [[ids[0]]], { noHeader: true })).toBe("repeat-1.0.residual…\n");
  });
  test("empty rows give only the header", () => {
    expect(renderTable([{ title: "a" }], [])).toBe("a\n─\n");
  });
  test("refuses a row longer than the columns", () => {
    expect(() => renderTable([{ title: "a" }], [["x", "y"]])).toThrow(RangeError);
  });
});

describe("isNumberLike", () => {
  test.each(["12", "-3.2", "3.2e-5", "1,024", "12.5%", "2^16", "2^-3", "1.5 KiB", "inf", "-inf"])("%s is a number", (s) =>
    expect(isNumberLike(s)).toBe(true),
  );
  test.each(["fc1", "fits", "", "n/a", "12 layers"])("%s is not", (s) => expect(isNumberLike(s)).toBe(false));
});
