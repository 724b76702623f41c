/**
 * A max-heap of tensor indices ordered by a key array: the larger key on top; among equal keys the lower rank
 * (by default the lower index). A tensor's key may change while it is out of the heap, never while it is in.
 * The window search tightens the largest bound first with it (the dynamic simulation takes the coarser BucketQueue).
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

// the binary64 words of one key, for its exponent and leading fraction bits (IEEE 754-2019 §3.4: sign, 11 exponent
// bits, then the fraction, most significant first), in the platform's byte order
const KEY = new Float64Array(1);
const KEY_WORDS = new Uint32Array(KEY.buffer);
const HIGH_WORD = new Uint8Array(Uint16Array.of(1).buffer)[0] === 1 ? 1 : 0;

/**
 * A queue of indices by a key in [0, 1] that never rises while an index is out of it, popped largest first only to
 * within a factor 2^(1/4): the keys fall into buckets a quarter binade wide (from the exponent and the two leading
 * fraction bits of the double), and a pop takes the most recent index of the highest bucket that is not empty. A key
 * that is not a number comes first; keys at or below 2^−62 share the last bucket. For orders that only steer work (the
 * dynamic simulation narrows whichever tensor it takes first to the same bounds): a push and a pop cost a few
 * operations against a heap's logarithm of sift steps.
 */
export class BucketQueue {
  // per bucket its most recent index (−1: empty), per index the one pushed before it into its bucket
  private readonly heads: Int32Array;
  private readonly next: Int32Array;
  // no bucket above this one holds an index (keys do not rise, so a pushed index never lands above it once popped)
  private top: number;
  private count = 0;
  constructor(n: number) {
    this.heads = new Int32Array(BUCKETS).fill(-1);
    this.next = new Int32Array(n);
    this.top = BUCKETS;
  }
  get size(): number {
    return this.count;
  }
  /** empty the queue, to be filled again */
  clear(): void {
    this.heads.fill(-1);
    this.top = BUCKETS;
    this.count = 0;
  }
  /** add index i (in [0, n), not in the queue already) with its key */
  push(i: number, key: number): void {
    const b = bucketOf(key);
    this.next[i] = this.heads[b]!;
    this.heads[b] = i;
    if (b < this.top) this.top = b;
    this.count++;
  }
  /** an index of the highest bucket that holds one (the queue not empty) */
  pop(): number {
    const heads = this.heads;
    let b = this.top;
    while (heads[b]! < 0) b++;
    this.top = b;
    const i = heads[b]!;
    heads[b] = this.next[i]!;
    this.count--;
    return i;
  }
}
// one first for keys that are not numbers (and any above 1), four per binade from 1 down to 2^−62 (the key 1 takes
// bucket 4, the binades 2^−1 … 2^−62 buckets 5 … 252; 1 … 3 stay empty), one last for keys at or below 2^−62
const BUCKETS = 254;
function bucketOf(key: number): number {
  if (!(key <= 1)) return 0;
  if (!(key > 2 ** -62)) return BUCKETS - 1;
  KEY[0] = key;
  const high = KEY_WORDS[HIGH_WORD]!;
  // key = 2^e·(1 + f): e in [−62, 0]; the bucket rises with −e and falls with f's two leading bits
  const e = (high >>> 20) - 1023;
  return 1 + 4 * -e + (3 - ((high >>> 18) & 3));
}
