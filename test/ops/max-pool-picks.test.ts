import { describe, expect, test } from "vitest";
import { createRandom } from "../../src/numeric/index.js";
import { maxPoolForward, poolGeometry } from "../../src/ops/pool/kernel.js";
import { pickChance } from "../../src/ops/pool/analytic.js";

// Overlapping max-pool windows can pick one pixel together: the share of a plane's pixels that some window picks, by
// inclusion–exclusion over the windows covering each pixel (src/ops/pool), against its definition, counted on planes of
// independent standard normals drawn with the project's seeded generator through the float64 kernel.
function sampledShare(height: number, width: number, size: number, stride: number, planes: number): number {
  const random = createRandom(20261203);
  const g = poolGeometry(planes, height, width, size, stride);
  const x = new Float64Array(planes * height * width).map(() => random.normal());
  return new Set(maxPoolForward(x, g).argmax).size / (planes * height * width);
}

/** The analytic share for the same plane: every pixel's chance, by the offsets of the windows covering it. */
function analyticShare(height: number, width: number, size: number, stride: number): number {
  const offsets = (x: number, n: number): number[] => {
    const windows = Math.floor((n - size) / stride) + 1;
    const list: number[] = [];
    for (let i = 0; i < windows; i++) if (i * stride <= x && x < i * stride + size) list.push(i * stride - x);
    return list;
  };
  let sum = 0;
  for (let r = 0; r < height; r++) for (let c = 0; c < width; c++) sum += pickChance(offsets(r, height), offsets(c, width), size, size);
  return sum / (height * width);
}

describe("pixels picked by overlapping max-pool windows", () => {
  test("one window picks each of its k pixels with chance 1/k; two 3 × 3 windows sharing a column of 3: 2/9 − 1/15 (definition)", () => {
    expect(pickChance([0], [0], 3, 3)).toBeCloseTo(1 / 9, 15);
    expect(pickChance([0], [0, -2], 3, 3)).toBeCloseTo(2 / 9 - 1 / 15, 15);
    // three windows of 3 positions at stride 1 over one position: 3·(1/3) − (1/4 + 1/4 + 1/5) + 1/5 = 1/2
    expect(pickChance([0], [-2, -1, 0], 1, 3)).toBeCloseTo(1 / 2, 15);
  });

  test.each([
    { size: 3, stride: 2 },
    { size: 3, stride: 1 },
    { size: 2, stride: 1 },
    { size: 5, stride: 2 },
  ])("size $size, stride $stride on 11 × 12 planes: the exact sum against 400 sampled planes", ({ size, stride }) => {
    const seen = sampledShare(11, 12, size, stride, 400);
    const exact = analyticShare(11, 12, size, stride);
    // ~53,000 pixels: the sampled share's standard error is below 0.002
    expect(Math.abs(exact - seen), `${exact} against ${seen}`).toBeLessThan(0.006);
  });

  test("beyond 16 windows over a pixel (size 5, stride 1) the independent-windows value bounds the share from above", () => {
    const seen = sampledShare(12, 12, 5, 1, 200);
    const bound = analyticShare(12, 12, 5, 1);
    expect(bound).toBeGreaterThan(seen);
    // the bound is loose by the windows' shared pixels, not by more than the share itself
    expect(bound).toBeLessThan(2 * seen);
  });
});
