/**
 * A max-heap of tensor indices ordered by a key array: the larger key on top; among equal keys the lower rank
 * (by default the lower index). A tensor's key may change while it is out of the heap, never while it is in.
 * The window search and the dynamic simulation both tighten the largest bound first with it.
 */
export class IndexHeap {
  // the heap's indices in a typed array of the keys' length (an index is in the heap at most once), not a growing list
  private readonly items: Int32Array;
  private count = 0;
  constructor(
    private readonly keys: Float64Array,
    private readonly rank: Int32Array | null = null,
  ) {
    this.items = new Int32Array(keys.length);
  }
  get size(): number {
    return this.count;
  }
  /** empty the heap, to be filled again over the same keys */
  clear(): void {
    this.count = 0;
  }
  private above(a: number, b: number): boolean {
    const ka = this.keys[a]!;
    const kb = this.keys[b]!;
    if (ka !== kb) return ka > kb;
    return this.rank === null ? a < b : this.rank[a]! < this.rank[b]!;
  }
  /**
   * Empty the heap and fill it with the first `count` of `indices` (distinct, each in [0, keys.length)) at once: Floyd's
   * bottom-up construction (Floyd 1964, Algorithm 245: a sift-down from each parent, O(count) against O(count log
   * count) for as many pushes). The order is strict (ties by rank), so the pops come out as after the pushes.
   */
  fill(indices: Int32Array, count: number): void {
    const items = this.items;
    for (let k = 0; k < count; k++) items[k] = indices[k]!;
    this.count = count;
    for (let j = (count >> 1) - 1; j >= 0; j--) this.siftDown(j, items[j]!, count);
  }
  /** add index i (in [0, keys.length), not in the heap already) */
  push(i: number): void {
    const items = this.items;
    let j = this.count++;
    while (j > 0) {
      const parent = (j - 1) >> 1;
      if (!this.above(i, items[parent]!)) break;
      items[j] = items[parent]!;
      j = parent;
    }
    items[j] = i;
  }
  pop(): number {
    const items = this.items;
    const top = items[0]!;
    const n = --this.count;
    if (n > 0) this.siftDown(0, items[n]!, n);
    return top;
  }
  // pop's and fill's step: index i at slot j of the first n slots, the larger child moved up until i is above both its
  // children
  private siftDown(j: number, i: number, n: number): void {
    const items = this.items;
    for (;;) {
      const l = 2 * j + 1;
      if (l >= n) break;
      const r = l + 1;
      const c = r < n && this.above(items[r]!, items[l]!) ? r : l;
      if (!this.above(items[c]!, i)) break;
      items[j] = items[c]!;
      j = c;
    }
    items[j] = i;
  }
}
