/**
 * A small seeded random source for the simulator, so every run is reproducible and nothing touches a global
 * generator. Uniforms come from xoshiro128** (Blackman & Vigna 2018, "Scrambled linear pseudorandom number
 * generators"), seeded through splitmix32 so nearby seeds give unrelated streams; normals from the Box–Muller
 * transform (Box & Muller 1958).
 */

/** A seeded stream of random numbers. */
export interface RandomSource {
  /** uniform in [0, 1), 53 random bits */
  uniform(): number;
  /** standard normal N(0, 1) */
  normal(): number;
  /** an integer uniform in [0, n) */
  integer(n: number): number;
}

function splitmix32(state: number): () => number {
  let s = state >>> 0;
  return () => {
    s = (s + 0x9e3779b9) >>> 0;
    let z = s;
    z = Math.imul(z ^ (z >>> 16), 0x85ebca6b) >>> 0;
    z = Math.imul(z ^ (z >>> 13), 0xc2b2ae35) >>> 0;
    return (z ^ (z >>> 16)) >>> 0;
  };
}

/**
 * A random source from an integer seed (any safe integer; the same seed always gives the same stream).
 * Throws RangeError for a seed that is not a safe integer.
 */
export function createRandomSource(seed: number): RandomSource {
  if (!Number.isSafeInteger(seed)) throw new RangeError(`seed must be a safe integer, got ${String(seed)}`);
  const mix = splitmix32((seed >>> 0) ^ Math.floor(seed / 4294967296));
  let a = mix();
  let b = mix();
  let c = mix();
  let d = mix();
  if ((a | b | c | d) === 0) a = 1;
  const next = (): number => {
    const result = Math.imul(rotl(Math.imul(b, 5), 7), 9) >>> 0;
    const t = b << 9;
    c ^= a;
    d ^= b;
    b ^= c;
    a ^= d;
    c ^= t;
    d = rotl(d, 11);
    return result;
  };
  let spare: number | null = null;
  const uniform = (): number => ((next() >>> 5) * 67108864 + (next() >>> 6)) / 9007199254740992;
  return {
    uniform,
    normal(): number {
      if (spare !== null) {
        const s = spare;
        spare = null;
        return s;
      }
      let u = 0;
      while (u === 0) u = uniform();
      const v = uniform();
      const radius = Math.sqrt(-2 * Math.log(u));
      spare = radius * Math.sin(2 * Math.PI * v);
      return radius * Math.cos(2 * Math.PI * v);
    },
    integer(n: number): number {
      return Math.floor(uniform() * n);
    },
  };
}

function rotl(x: number, k: number): number {
  return ((x << k) | (x >>> (32 - k))) >>> 0;
}
