import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { BucketQueue, IndexHeap } from "../../src/scale/heap.js";

// The reference is a plain sort by (key descending, rank ascending): a heap pops in that order (common practice).
describe("IndexHeap pops the largest key first, ties by rank", () => {
  it("matches a sort for any keys with ties, by index and by a given rank", () => {
    fc.assert(
      fc.property(fc.array(fc.integer({ min: 0, max: 5 }), { maxLength: 60 }), fc.boolean(), (raw, ranked) => {
        const keys = Float64Array.from(raw, (x) => x / 4);
        const n = keys.length;
        // a rank that reverses the index order, so ties come out the other way round
        const rank = ranked ? Int32Array.from({ length: n }, (_, i) => n - 1 - i) : null;
        const rankOf = (i: number): number => (rank !== null ? rank[i]! : i);
        const heap = new IndexHeap(keys, rank);
        for (let i = n - 1; i >= 0; i--) heap.push(i);
        const popped: number[] = [];
        while (heap.size > 0) popped.push(heap.pop());
        const expected = Array.from({ length: n }, (_, i) => i).sort((a, b) => keys[b]! - keys[a]! || rankOf(a) - rankOf(b));
        expect(popped).toEqual(expected);
      }),
    );
  });

  it("filled at once (Floyd's construction) pops as the sort does, before and after more pushes", () => {
    fc.assert(
      fc.property(fc.array(fc.integer({ min: 0, max: 5 }), { maxLength: 60 }), fc.boolean(), fc.nat(), (raw, ranked, cut) => {
        const keys = Float64Array.from(raw, (x) => x / 4);
        const n = keys.length;
        const rank = ranked ? Int32Array.from({ length: n }, (_, i) => n - 1 - i) : null;
        const rankOf = (i: number): number => (rank !== null ? rank[i]! : i);
        // the first `filled` indices (in a scrambled order) at once, the rest pushed one by one afterwards
        const filled = n === 0 ? 0 : cut % (n + 1);
        const order = Int32Array.from({ length: n }, (_, i) => (n - 1 - i + cut) % n);
        const heap = new IndexHeap(keys, rank);
        heap.fill(order, filled);
        for (let k = filled; k < n; k++) heap.push(order[k]!);
        const popped: number[] = [];
        while (heap.size > 0) popped.push(heap.pop());
        const expected = Array.from({ length: n }, (_, i) => i).sort((a, b) => keys[b]! - keys[a]! || rankOf(a) - rankOf(b));
        expect(popped).toEqual(expected);
      }),
    );
  });

  it("lets a key fall while its index is out of the heap", () => {
    const keys = Float64Array.from([5, 4, 3]);
    const heap = new IndexHeap(keys);
    heap.push(0);
    heap.push(1);
    heap.push(2);
    expect(heap.pop()).toBe(0);
    keys[0] = 1;
    heap.push(0);
    expect([heap.pop(), heap.pop(), heap.pop()]).toEqual([1, 2, 0]);
  });
});

// The reference is the bucket of each key by its binary64 exponent and two leading fraction bits (IEEE 754-2019 §3.4),
// worked out here with Math.log2 and floor: a pop never takes a key of a lower bucket while a higher one holds any.
describe("BucketQueue pops the largest key first to within a quarter binade", () => {
  // a quarter-binade bucket from the top (larger first): NaN first, keys at or below 2^-62 last
  const bucket = (key: number): number => {
    if (!(key <= 1)) return -1;
    if (!(key > 2 ** -62)) return 1000;
    const e = Math.floor(Math.log2(key));
    const quarter = Math.floor(((key / 2 ** e) - 1) * 4);
    return -(4 * e + quarter);
  };
  // (most keys on a grid of 1/256 in [0, 1], so that many share a binade; some anywhere, not numbers, or tiny)
  const keyArb = fc.oneof(
    { arbitrary: fc.integer({ min: 0, max: 256 }).map((k) => k / 256), weight: 6 },
    { arbitrary: fc.double({ min: 0, max: 1, noNaN: true }), weight: 2 },
    { arbitrary: fc.constantFrom(Number.NaN, 2 ** -70, 2 ** -62), weight: 1 },
  );

  it("pops every index once, never a lower bucket before a higher one, keys falling between pops", () => {
    fc.assert(
      fc.property(fc.array(keyArb, { maxLength: 80 }), fc.array(fc.double({ min: 0, max: 1, noNaN: true }), { maxLength: 80 }), (keys, falls) => {
        const n = keys.length;
        const q = new BucketQueue(n);
        const key = keys.slice();
        for (let i = 0; i < n; i++) q.push(i, key[i]!);
        const seen = new Set<number>();
        let pushedBack = 0;
        let lastBucket = -Infinity;
        while (q.size > 0) {
          const i = q.pop();
          const b = bucket(key[i]!);
          // every index still in the queue lies in this bucket or a lower one
          expect(b).toBeGreaterThanOrEqual(lastBucket);
          lastBucket = b;
          const fall = falls[pushedBack];
          if (fall !== undefined && key[i] === key[i]) {
            // pushed back with a key that has not risen: it lands in this bucket or a lower one
            key[i] = key[i]! * fall;
            pushedBack++;
            q.push(i, key[i]!);
            continue;
          }
          expect(seen.has(i)).toBe(false);
          seen.add(i);
        }
        expect(seen.size).toBe(n);
      }),
    );
  });

  it("puts keys a quarter binade apart in different buckets and keys of one quarter together", () => {
    const q = new BucketQueue(4);
    // 0.3 and 0.31 share the quarter [0.25, 0.3125); 0.32 lies in the next; 0.9 in [0.875, 1)
    q.push(0, 0.3);
    q.push(1, 0.9);
    q.push(2, 0.32);
    q.push(3, 0.31);
    expect(q.pop()).toBe(1);
    expect(q.pop()).toBe(2);
    expect(new Set([q.pop(), q.pop()])).toEqual(new Set([0, 3]));
  });
});
