import fc from "fast-check";
import { describe, expect, it } from "vitest";
import { IndexHeap } from "../../src/scale/heap.js";

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
