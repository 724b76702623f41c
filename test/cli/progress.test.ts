import { describe, expect, test } from "vitest";
import { createProgress, progressLine } from "../../src/cli/progress.js";

function fakeStream(isTTY: boolean) {
  const writes: string[] = [];
  return { isTTY, columns: 60, writes, write: (chunk: string) => writes.push(chunk) };
}

describe("createProgress", () => {
  test("writes nothing when the stream is not a terminal", () => {
    const stream = fakeStream(false);
    const progress = createProgress({ total: 10, stream });
    for (let i = 0; i < 10; i++) progress.tick();
    progress.finish();
    expect(stream.writes).toEqual([]);
  });
  test("redraws at most every 100 ms and clears the line at the end", () => {
    const stream = fakeStream(true);
    let clock = 0;
    const progress = createProgress({ total: 4, stream, label: "checking", now: () => clock });
    expect(stream.writes).toHaveLength(1);
    progress.tick(); // same instant: no redraw
    clock = 50;
    progress.tick();
    expect(stream.writes).toHaveLength(1);
    clock = 100;
    progress.tick();
    expect(stream.writes).toHaveLength(2);
    expect(stream.writes[1]).toContain("3/4");
    progress.finish();
    progress.finish();
    expect(stream.writes.at(-1)).toBe("\r\x1b[2K");
    expect(stream.writes).toHaveLength(3);
    progress.tick();
    expect(stream.writes).toHaveLength(3);
  });
});

describe("progressLine", () => {
  test("fits the width and shows counts and percent", () => {
    const line = progressLine("checking", 50, 200, 60);
    expect(line.length).toBeLessThanOrEqual(60);
    expect(line).toContain("50/200");
    expect(line).toContain("25%");
  });
  test("drops the bar on a very narrow terminal", () => {
    expect(progressLine("", 1, 2, 12)).not.toContain("[");
  });
});
