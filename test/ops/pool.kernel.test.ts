import { describe, expect, it } from "vitest";
import {
  averagePoolBackward,
  averagePoolForward,
  maxPoolBackward,
  maxPoolForward,
  poolGeometry,
  positionPoolGeometry,
} from "../../src/ops/pool/kernel.js";
import { dot, gradientError, randomArray, testRandom } from "../simulate/gradcheck.js";

// Backward passes are checked against central finite differences (common practice), relative error < 1e-6.
describe("average-pool kernel", () => {
  it("averages each window", () => {
    const x = Float64Array.from([1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16]);
    expect([...averagePoolForward(x, poolGeometry(1, 4, 4, 2, 2))]).toEqual([3.5, 5.5, 11.5, 13.5]);
  });

  it.each([
    { size: 2, stride: 2 },
    { size: 3, stride: 1 },
    { size: 3, stride: 2 },
  ])("backward matches central differences (size $size, stride $stride)", ({ size, stride }) => {
    const rnd = testRandom(16);
    const g = poolGeometry(3, 7, 6, size, stride);
    const x = randomArray(rnd, 3 * 7 * 6);
    const r = randomArray(rnd, 3 * g.outHeight * g.outWidth);
    const f = (): number => dot(averagePoolForward(x, g), r);
    expect(gradientError(f, x, averagePoolBackward(r, g))).toBeLessThan(1e-6);
  });
});

describe("max-pool kernel", () => {
  it("takes each window's maximum", () => {
    const x = Float64Array.from([1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16]);
    expect([...maxPoolForward(x, poolGeometry(1, 4, 4, 2, 2)).y]).toEqual([6, 8, 14, 16]);
  });

  it.each([
    { size: 2, stride: 2 },
    { size: 3, stride: 1 },
  ])("backward matches central differences (size $size, stride $stride)", ({ size, stride }) => {
    const rnd = testRandom(17);
    const g = poolGeometry(2, 6, 6, size, stride);
    // distinct values well apart, so a step of 1e-5 never changes which element is largest
    const x = randomArray(rnd, 72);
    const order = [...x.keys()].sort((a, b) => x[a]! - x[b]!);
    order.forEach((index, rank) => (x[index] = rank * 0.1));
    const r = randomArray(rnd, 2 * g.outHeight * g.outWidth);
    const f = (): number => dot(maxPoolForward(x, g).y, r);
    const { argmax } = maxPoolForward(x, g);
    expect(gradientError(f, x, maxPoolBackward(r, argmax, x.length))).toBeLessThan(1e-6);
  });
});

describe("max-pool kernel with NaN inputs", () => {
  // a window holding a NaN gives NaN, as IEEE 754-2019 §9.6 maximum(x, NaN) is NaN (and as the ReLU kernel passes it):
  // a run whose values went bad must not read as finite after the pool
  it.each([0, 4, 8])("a NaN anywhere in a 3 × 3 window (element %i) makes its output NaN", (at) => {
    const x = Float64Array.from({ length: 9 }, (_, i) => i + 1);
    x[at] = NaN;
    const { y, argmax } = maxPoolForward(x, poolGeometry(1, 3, 3, 3, 3));
    expect(y[0]).toBeNaN();
    expect(argmax[0]).toBe(at);
  });

  it("overlapping windows that share the NaN both give NaN; the others keep their maxima; the gradient goes to the NaN", () => {
    // 1 plane, 3 × 5, size 3, stride 1: windows at columns 0, 1, 2; the NaN at column 1 of row 1 lies in the first two
    const x = Float64Array.from([1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15]);
    x[6] = NaN;
    const g = poolGeometry(1, 3, 5, 3, 1);
    const { y, argmax } = maxPoolForward(x, g);
    expect(y[0]).toBeNaN();
    expect(y[1]).toBeNaN();
    expect(y[2]).toBe(15);
    const dx = maxPoolBackward(Float64Array.from([1, 2, 4]), argmax, x.length);
    expect(dx[6]).toBe(3);
    expect(dx[14]).toBe(4);
  });

  it("infinities are values, not NaN: +∞ wins its window, −∞ loses", () => {
    const x = Float64Array.from([1, Infinity, -Infinity, 2]);
    expect([...maxPoolForward(x, poolGeometry(1, 1, 4, 1, 1)).y]).toEqual([1, Infinity, -Infinity, 2]);
    expect([...maxPoolForward(x, positionPoolGeometry(1, 4, 1, 2, 2)).y]).toEqual([Infinity, 2]);
  });
});

describe("pooling over positions of feature rows", () => {
  it("pools each feature over windows of positions", () => {
    // 1 sample, 4 positions × 2 features: [[1, 10], [2, 20], [3, 30], [4, 40]]
    const x = Float64Array.from([1, 10, 2, 20, 3, 30, 4, 40]);
    const g = positionPoolGeometry(1, 4, 2, 2, 2);
    expect([...averagePoolForward(x, g)]).toEqual([1.5, 15, 3.5, 35]);
    expect([...maxPoolForward(x, g).y]).toEqual([2, 20, 4, 40]);
  });

  it("backward matches central differences for both pools", () => {
    const rnd = testRandom(27);
    const g = positionPoolGeometry(2, 7, 3, 3, 2);
    const x = randomArray(rnd, 2 * 7 * 3);
    const order = [...x.keys()].sort((a, b) => x[a]! - x[b]!);
    order.forEach((index, rank) => (x[index] = rank * 0.1));
    const r = randomArray(rnd, 2 * g.outHeight * g.outWidth);
    expect(gradientError(() => dot(averagePoolForward(x, g), r), x, averagePoolBackward(r, g))).toBeLessThan(1e-6);
    const { argmax } = maxPoolForward(x, g);
    expect(gradientError(() => dot(maxPoolForward(x, g).y, r), x, maxPoolBackward(r, argmax, x.length))).toBeLessThan(1e-6);
  });
});
