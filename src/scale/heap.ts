/**
 * A max-heap of tensor indices ordered by a key array: the larger key on top; among equal keys the lower rank
 * (by default the lower index). A tensor's key may change while it is out of the heap, never while it is in.
 * The window search and the dynamic simulation both tighten the largest bound first with it.
 */
export class IndexHeap {
  private readonly items: number[] = [];
  constructor(
    private readonly keys: Float64Array,
    private readonly rank: Int32Array | null = null,
  ) {}
  get size(): number {
    return this.items.length;
  }
  /** empty the heap, to be filled again over the same keys */
  clear(): void {
    this.items.length = 0;
  }
  private above(a: number, b: number): boolean {
    const ka = this.keys[a]!;
    const kb = this.keys[b]!;
    if (ka !== kb) return ka > kb;
    return this.rank === null ? a < b : this.rank[a]! < this.rank[b]!;
  }
  push(i: number): void {
    const items = this.items;
    let j = items.length;
    items.push(i);
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
    const last = items.pop()!;
    const n = items.length;
    if (n > 0) {
      let j = 0;
      for (;;) {
        const l = 2 * j + 1;
        if (l >= n) break;
        const r = l + 1;
        const c = r < n && this.above(items[r]!, items[l]!) ? r : l;
        if (!this.above(items[c]!, last)) break;
        items[j] = items[c]!;
        j = c;
      }
      items[j] = last;
    }
    return top;
  }
}
