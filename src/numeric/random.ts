/**
 * A small seeded random source for simulation and Monte Carlo checks: deterministic for a given seed,
 * on every run and machine. Never uses Math.random.
 *
 * Generator: xoshiro128** 1.1 (Blackman & Vigna, "Scrambled linear pseudorandom number generators",
 * ACM TOMS 2021; reference code xoshiro128starstar.c), 128-bit state, period 2^128 − 1, with 32-bit
 * integer arithmetic only. The state is filled from the seed by two outputs of splitmix64 (Steele, Lea &
 * Flood 2014), the seeding the xoshiro authors recommend.
 */

/** A seeded random source. */
export interface RandomSource {
  /** The next 32-bit output of the generator, an integer in [0, 2^32). */
  nextUint32(): number;
  /** A uniform double in [0, 1) with 53 random bits. */
  next(): number;
  /** A standard normal draw (Box–Muller; the second value of each pair is kept for the next call). */
  normal(): number;
  /** Fills `out` with uniform draws in [low, high) (default [0, 1)) and returns it. */
  fillUniform(out: Float64Array, low?: number, high?: number): Float64Array;
  /** Fills `out` with normal draws of the given mean and standard deviation (default 0, 1) and returns it. */
  fillNormal(out: Float64Array, mean?: number, std?: number): Float64Array;
}

const MASK64 = (1n << 64n) - 1n;

// splitmix64 step (Steele, Lea & Flood 2014; Vigna's splitmix64.c): returns [next state, output]
function splitmix64(state: bigint): [bigint, bigint] {
  const s = (state + 0x9e3779b97f4a7c15n) & MASK64;
  let z = s;
  z = ((z ^ (z >> 30n)) * 0xbf58476d1ce4e5b9n) & MASK64;
  z = ((z ^ (z >> 27n)) * 0x94d049bb133111ebn) & MASK64;
  return [s, z ^ (z >> 31n)];
}

const TWO_PI = 2 * Math.PI;

/**
 * Creates a seeded random source (xoshiro128**, seeded by splitmix64 from the seed taken modulo 2^64).
 * The same seed gives the same sequence everywhere. Throws RangeError unless `seed` is a safe integer.
 */
export function createRandom(seed: number): RandomSource {
  if (!Number.isSafeInteger(seed)) throw new RangeError(`createRandom: seed must be a safe integer, got ${seed}`);
  let state = BigInt.asUintN(64, BigInt(seed));
  let out1: bigint;
  let out2: bigint;
  [state, out1] = splitmix64(state);
  [, out2] = splitmix64(state);
  let s0 = Number(out1 & 0xffffffffn) | 0;
  let s1 = Number(out1 >> 32n) | 0;
  let s2 = Number(out2 & 0xffffffffn) | 0;
  let s3 = Number(out2 >> 32n) | 0;
  if ((s0 | s1 | s2 | s3) === 0) s0 = 1; // the all-zero state is a fixed point; splitmix64 never gives it in practice

  // xoshiro128** next(): result = rotl(s1·5, 7)·9, then the xorshift state update (reference code)
  const nextUint32 = (): number => {
    const m = Math.imul(s1, 5);
    const result = Math.imul((m << 7) | (m >>> 25), 9) >>> 0;
    const t = s1 << 9;
    s2 ^= s0;
    s3 ^= s1;
    s1 ^= s2;
    s0 ^= s3;
    s2 ^= t;
    s3 = (s3 << 11) | (s3 >>> 21);
    return result;
  };
  // 53-bit double from the top 27 and 26 bits of two outputs: (a·2^26 + b)/2^53 (as in genrand_res53 of
  // Matsumoto & Nishimura's MT19937 reference code)
  const next = (): number => {
    const a = nextUint32() >>> 5;
    const b = nextUint32() >>> 6;
    return (a * 67108864 + b) / 9007199254740992;
  };
  let spare = 0;
  let hasSpare = false;
  // Box & Muller 1958: r = √(−2 ln u1), (r cos 2πu2, r sin 2πu2) are independent N(0,1); u1 ∈ (0, 1]
  const normal = (): number => {
    if (hasSpare) {
      hasSpare = false;
      return spare;
    }
    const u1 = 1 - next();
    const u2 = next();
    const r = Math.sqrt(-2 * Math.log(u1));
    spare = r * Math.sin(TWO_PI * u2);
    hasSpare = true;
    return r * Math.cos(TWO_PI * u2);
  };
  return {
    nextUint32,
    next,
    normal,
    fillUniform(out, low = 0, high = 1) {
      const width = high - low;
      for (let i = 0; i < out.length; i++) out[i] = low + width * next();
      return out;
    },
    fillNormal(out, mean = 0, std = 1) {
      for (let i = 0; i < out.length; i++) out[i] = mean + std * normal();
      return out;
    },
  };
}
