/**
 * The swamping sum of the optimizer check, arranged to be cheap: the weight's binade masses once per weight
 * profile, the update's shares below powers of two once per update profile and exponent, and a plain loop over
 * typed arrays for each format that receives the update.
 *
 * Swamping (SCIENCE.md §1.1 [X]; Micikevicius et al. 2018 §3.1): w + Δ == w under round-to-nearest-even
 * whenever |Δ| < ½·ulp(w). For w in [2^e, 2^(e+1)) in a format of precision p, ulp(w) = 2^(e−p+1), so the
 * update is lost when |Δ| < 2^(e−p); below the smallest normal the spacing is that of the subnormals.
 */
import type { Format } from "../formats/index.js";
import type { MagnitudeProfile } from "../magnitude/types.js";
import { elementLaw, fractionBelow, nonzeroElements } from "../risk/index.js";

/** What the swamping sum needs of a format: its precision p and the exponent of its smallest normal. */
export type SwampingFormat = Pick<Format, "precision" | "emin">;

/** P(|Δ| < 2^k) by integer exponent k. */
interface SharesByExponent {
  at(k: number): number;
}

/**
 * `fractionBelow(profile, ·)` specialised once per profile. Without a draw spread the element law is read at the
 * profile's rms directly, which is what the draw integral reduces to (src/risk/profile.ts): no law lookup, no
 * integrand closure per threshold. With a spread, the draw integral itself.
 */
export function shareBelow(profile: MagnitudeProfile): (t: number) => number {
  if (profile.log2Spread > 0) return (t) => fractionBelow(profile, t);
  if (!(profile.rms > 0) || !(nonzeroElements(profile) > 0)) return () => 0;
  const r = profile.rms;
  // constant-like (every nonzero element equals the scale): a step at the rms, as fractionBelow has it
  if (profile.shape === "constant" || (profile.shape === "log-normal" && !((profile.elementLog2Spread ?? 0) > 0))) {
    return (t) => (r <= t ? 1 : 0);
  }
  const law = elementLaw(profile);
  return (t) => law.below(r, t);
}

// Binades summed: 40 below the weight's rms binade (lighter than any share we report) to 12 above it.
const BELOW_CENTRE = 40;
const ABOVE_CENTRE = 12;

interface WeightBinades {
  /** the lowest binade summed */
  low: number;
  /** P(|w| < 2^low) among the nonzero weights: charged the loss of binade `low` (an upper bound, negligible mass) */
  under: number;
  /** mass[e − low] = P(|w| in [2^e, 2^(e+1))) among the nonzero weights; the last binade takes all above it */
  mass: Float64Array;
}

// Every format and point of the schedule reads the same binades of the same weights.
const BINADES = new WeakMap<MagnitudeProfile, WeightBinades>();

function weightBinades(weight: MagnitudeProfile): WeightBinades {
  const low = Math.floor(Math.log2(weight.rms)) - BELOW_CENTRE;
  const known = BINADES.get(weight);
  if (known !== undefined && known.low === low) return known;
  const below = shareBelow(weight);
  const mass = new Float64Array(BELOW_CENTRE + ABOVE_CENTRE + 1);
  // a binade is [2^e, 2^(e+1)), so a weight exactly at 2^e belongs to binade e, not e − 1
  const under = below(2 ** low * (1 - 2 ** -40));
  let previous = under;
  for (let i = 0; i < mass.length; i++) {
    const next = i === mass.length - 1 ? 1 : below(2 ** (low + i + 1) * (1 - 2 ** -40));
    mass[i] = Math.max(0, next - previous);
    previous = next;
  }
  const binades = { low, under, mass };
  BINADES.set(weight, binades);
  return binades;
}

// Exponents of powers of two a double can take, with room for the shifts by a precision.
const EXPONENT_LIMIT = 1300;

/**
 * P(|Δ| < 2^k) of one update profile at a time, by k, each computed on first use: the variants (planned, no
 * master copy, binary32 master, compensated) read thresholds 2^(e−p) that coincide up to a shift by the
 * precision. `use` switches to another profile; one table serves a whole check without allocating.
 */
export class UpdateShares implements SharesByExponent {
  private readonly values = new Float64Array(2 * EXPONENT_LIMIT + 1);
  private readonly stamps = new Uint32Array(2 * EXPONENT_LIMIT + 1);
  private stamp = 0;
  private below: (t: number) => number = () => 0;

  /** Read the shares of `update` from now on. */
  use(update: MagnitudeProfile): this {
    this.below = shareBelow(update);
    this.stamp++;
    if (this.stamp === 0xffffffff) {
      this.stamps.fill(0);
      this.stamp = 1;
    }
    return this;
  }

  /** P(|Δ| < 2^k) of the current update profile. */
  at(k: number): number {
    const i = k + EXPONENT_LIMIT;
    if (!(i >= 0 && i < this.values.length)) return this.below(2 ** k);
    if (this.stamps[i] === this.stamp) return this.values[i] as number;
    const share = this.below(2 ** k);
    this.values[i] = share;
    this.stamps[i] = this.stamp;
    return share;
  }
}

/**
 * Share of updates lost when adding them to weights stored in `format`, with the update's shares below powers
 * of two read from `shares`: Σ over the weight's binades of P(|w| in [2^e, 2^(e+1))) · P(|Δ| < 2^(e−p))
 * (SCIENCE.md §1.1), zero weights charged P(|Δ| < half the smallest subnormal).
 */
export function swampedShareOf(weight: MagnitudeProfile, shares: SharesByExponent, format: SwampingFormat): number {
  const p = format.precision;
  const subnormal = format.emin - p;
  const zeros = weight.zeroFraction;
  // a zero weight keeps an update only when it reaches half the smallest subnormal
  let lost = zeros === 0 ? 0 : zeros * shares.at(subnormal);
  if (!(weight.rms > 0) || zeros >= 1) return zeros > 0 ? lost : shares.at(subnormal);
  const { low, under, mass } = weightBinades(weight);
  let nonzeroLost = under === 0 ? 0 : under * shares.at(Math.max(low, format.emin) - p);
  for (let i = 0; i < mass.length; i++) {
    const m = mass[i] as number;
    if (m === 0) continue;
    const e = low + i;
    nonzeroLost += m * shares.at(e < format.emin ? subnormal : e - p);
  }
  lost += (1 - zeros) * nonzeroLost;
  return Math.min(1, Math.max(0, lost));
}

/**
 * Share of updates lost when adding updates to weights stored in a format of precision `precision`.
 * `weight` describes the stored weights; `updateBelow(t)` is the share of update elements with |Δ| < t
 * (see {@link swampedShareOf}).
 */
export function swampedShare(weight: MagnitudeProfile, updateBelow: (t: number) => number, format: SwampingFormat): number {
  return swampedShareOf(weight, { at: (k) => updateBelow(2 ** k) }, format);
}
