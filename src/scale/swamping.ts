/**
 * The swamping sums of the optimizer check, arranged to be cheap: the weight's binade masses once per distinct
 * weight profile, the update's shares below powers of two once per distinct update profile and exponent, and a
 * plain loop over typed arrays for each format that receives the update.
 *
 * Swamping (SCIENCE.md §1.1 [X]; Micikevicius et al. 2018 §3.1): w + Δ == w under round-to-nearest-even
 * whenever |Δ| < ½·ulp(w). For w in [2^e, 2^(e+1)) in a format of precision p, ulp(w) = 2^(e−p+1), so the
 * update is lost when |Δ| < 2^(e−p); below the smallest normal the spacing is that of the subnormals.
 *
 * What is summed is the share of the update's squared norm that is lost, not the share of its elements: the elements
 * lost are the smallest, and a lost update is a zero gradient for that weight in that step, which the check weighs by
 * its energy as it weighs flushed gradients (the gradient-energy rule of src/risk/catalogue.ts). A Gaussian update of
 * rms 2^5.7 half-ulps loses 1.6% of its elements but ~1e-6 of its energy; one at or below half an ulp loses both.
 */
import type { Format } from "../formats/index.js";
import type { MagnitudeProfile } from "../magnitude/types.js";
import { elementLaw, energyBelow, fractionBelow, nonzeroElements } from "../risk/index.js";

/** What the swamping sum needs of a format: its precision p and the exponent of its smallest normal. */
export type SwampingFormat = Pick<Format, "precision" | "emin">;

/** The update's share (of its squared norm) below 2^k, by integer exponent k. */
interface SharesByExponent {
  at(k: number): number;
}

/**
 * `fractionBelow(profile, ·)` (`energy`: `energyBelow`, the share of the squared norm carried by elements at or below t)
 * specialised once per profile. Without a draw spread the element law is read at the profile's rms directly, which is
 * what the draw integral reduces to (src/risk/profile.ts): no law lookup, no integrand closure per threshold. With a
 * spread, the draw integral itself. Constant-like elements (every nonzero one equals the scale): a step at the rms,
 * their energy share equal to their count.
 */
export function shareBelow(profile: MagnitudeProfile, energy = false): (t: number) => number {
  if (profile.log2Spread > 0) return energy ? (t) => energyBelow(profile, t) : (t) => fractionBelow(profile, t);
  if (!(profile.rms > 0) || !(nonzeroElements(profile) > 0)) return () => 0;
  const r = profile.rms;
  if (profile.shape === "constant" || (profile.shape === "log-normal" && !((profile.elementLog2Spread ?? 0) > 0))) {
    return (t) => (r <= t ? 1 : 0);
  }
  const law = elementLaw(profile);
  return energy ? (t) => law.energyBelow(r, t) : (t) => law.below(r, t);
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

function weightBinades(weight: MagnitudeProfile): WeightBinades {
  const low = Math.floor(Math.log2(weight.rms)) - BELOW_CENTRE;
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
  return { low, under, mass };
}

/**
 * The share of the update's squared norm with |Δ| < 2^k, by integer exponent k, each computed on first use: the formats that
 * receive the update read thresholds 2^(e−p) that coincide up to a shift by the precision.
 */
class UpdateShares implements SharesByExponent {
  private base = 0;
  private values = new Float64Array(0);

  constructor(private readonly below: (t: number) => number) {}

  at(k: number): number {
    let i = k - this.base;
    if (!(i >= 0 && i < this.values.length)) i = this.reach(k);
    let share = this.values[i] as number;
    if (Number.isNaN(share)) {
      share = this.below(2 ** k);
      this.values[i] = share;
    }
    return share;
  }

  // widen the table to hold exponent k; the first call sizes it for the binades of a weight and the subnormal
  // spacing of binary32 below them
  private reach(k: number): number {
    const empty = this.values.length === 0;
    const from = Math.min(k - (empty ? 160 : 64), empty ? k : this.base);
    const to = Math.max(k + 64, this.base + this.values.length);
    const values = new Float64Array(to - from).fill(NaN);
    // nothing to copy into a new table (its base is 0, which can lie above `from`: a negative offset throws)
    if (!empty) values.set(this.values, this.base - from);
    this.base = from;
    this.values = values;
    return k - from;
  }
}

/**
 * What fractionBelow reads of a profile (src/risk/profile.ts): the element law and its scale, and whether any
 * element is nonzero (the element count and the share of zeros enter only through that; the shares are of the
 * nonzero elements). `zeroFraction` is set apart: the swamping sum charges a weight's zeros itself.
 */
export function lawOf(profile: MagnitudeProfile, zeroFraction = 0): MagnitudeProfile {
  const law: MagnitudeProfile = {
    elements: nonzeroElements(profile) > 0 ? 1 : 0,
    zeroFraction,
    shape: profile.shape,
    rms: profile.rms,
    log2Spread: profile.log2Spread,
  };
  if (profile.bound !== undefined) law.bound = profile.bound;
  if (profile.elementLog2Spread !== undefined) law.elementLog2Spread = profile.elementLog2Spread;
  if (profile.mixture !== undefined) law.mixture = profile.mixture;
  return law;
}

/**
 * Whether two profiles have one law as {@link lawOf} reads it (the zero share aside) and one rms: the lost shares of
 * updates of equal laws against weights of equal laws are equal, whatever else their profiles hold.
 */
export function sameLaw(a: MagnitudeProfile, b: MagnitudeProfile): boolean {
  return (
    a.rms === b.rms &&
    a.log2Spread === b.log2Spread &&
    a.shape === b.shape &&
    a.bound === b.bound &&
    a.elementLog2Spread === b.elementLog2Spread &&
    a.mixture === b.mixture &&
    nonzeroElements(a) > 0 === nonzeroElements(b) > 0
  );
}

// The tables of every law met so far, shared by every assessment (a batch meets the same layers and learning
// rates spec after spec): found by rms, then by the fields the shares read (lawOf), compared without building the
// law. Keyed by those numbers only; cleared when they pass a bound, so a long-running worker does not grow without end.
const TABLES_LIMIT = 4096;
let tableCount = 0;

interface WeightEntry {
  law: MagnitudeProfile;
  binades: WeightBinades | null;
}

interface UpdateEntry {
  law: MagnitudeProfile;
  shares: UpdateShares;
  /** lost shares already summed against a weight: precision, emin and the share, in threes */
  sums: Map<WeightEntry, number[]>;
}

const WEIGHTS = new Map<number, WeightEntry[]>();
const UPDATES = new Map<number, UpdateEntry[]>();

// whether `law` (made by lawOf) is the law of `profile` with its zero share set to `zeroFraction`
function isLawOf(law: MagnitudeProfile, profile: MagnitudeProfile, zeroFraction: number): boolean {
  return (
    law.log2Spread === profile.log2Spread &&
    law.shape === profile.shape &&
    law.zeroFraction === zeroFraction &&
    law.bound === profile.bound &&
    law.elementLog2Spread === profile.elementLog2Spread &&
    law.mixture === profile.mixture &&
    law.elements === (nonzeroElements(profile) > 0 ? 1 : 0)
  );
}

function room(): void {
  if (tableCount < TABLES_LIMIT) return;
  WEIGHTS.clear();
  UPDATES.clear();
  tableCount = 0;
}

// the entry of `profile`'s law (its zeros set to `zeroFraction`) in `tables`, made by `make` on first meeting
function entryOf<E extends { law: MagnitudeProfile }>(
  tables: Map<number, E[]>,
  profile: MagnitudeProfile,
  zeroFraction: number,
  make: (law: MagnitudeProfile) => E,
): E {
  const list = tables.get(profile.rms);
  if (list !== undefined) for (const entry of list) if (isLawOf(entry.law, profile, zeroFraction)) return entry;
  room();
  const entry = make(lawOf(profile, zeroFraction));
  const home = tables.get(profile.rms);
  if (home === undefined) tables.set(profile.rms, [entry]);
  else home.push(entry);
  tableCount++;
  return entry;
}

const weightEntry = (weight: MagnitudeProfile): WeightEntry =>
  entryOf(WEIGHTS, weight, weight.zeroFraction, (law) => ({ law, binades: law.rms > 0 ? weightBinades(law) : null }));

const updateEntry = (update: MagnitudeProfile): UpdateEntry =>
  entryOf(UPDATES, update, 0, (law) => ({ law, shares: new UpdateShares(shareBelow(law, true)), sums: new Map() }));

/**
 * The swamping sums of one assessment against a fixed list of formats. Weights of equal laws (the layers of one
 * width) share their binade masses, updates of equal laws (Adam's, set by the learning rate alone) their shares,
 * and each pair of the two its sums, within an assessment and across assessments.
 */
export class SwampingSums {
  // for each format, the first of the list with its precision and range: equal formats share one sum
  private readonly first: number[];
  // the lists already given, by update and weight: the same pair meets every format of this assessment at once
  private readonly given = new Map<UpdateEntry, Map<WeightEntry, Float64Array>>();

  constructor(private readonly formats: readonly SwampingFormat[]) {
    this.first = formats.map((format) => formats.findIndex((f) => f.precision === format.precision && f.emin === format.emin));
  }

  /** The share of `update`'s squared norm lost against `weight`, one per format, in the order given to the constructor. */
  lost(weight: MagnitudeProfile, update: MagnitudeProfile): Float64Array {
    const w = weightEntry(weight);
    const u = updateEntry(update);
    let byWeight = this.given.get(u);
    if (byWeight === undefined) {
      byWeight = new Map();
      this.given.set(u, byWeight);
    }
    const given = byWeight.get(w);
    if (given !== undefined) return given;
    let known = u.sums.get(w);
    if (known === undefined) {
      known = [];
      u.sums.set(w, known);
    }
    // a typed list: its elements stay doubles whatever the first share is (a share of exactly 0 would start a plain
    // list as small integers, and the optimised code that read it would be thrown away at the first fraction)
    const lost = new Float64Array(this.formats.length);
    for (let i = 0; i < this.formats.length; i++) {
      const same = this.first[i] as number;
      if (same < i) {
        lost[i] = lost[same] as number;
        continue;
      }
      const format = this.formats[i] as SwampingFormat;
      let value = NaN;
      for (let j = 0; j < known.length; j += 3) {
        if (known[j] === format.precision && known[j + 1] === format.emin) {
          value = known[j + 2] as number;
          break;
        }
      }
      if (Number.isNaN(value)) {
        value = sumLost(w.law, w.binades, u.shares, format);
        known.push(format.precision, format.emin, value);
      }
      lost[i] = value;
    }
    byWeight.set(w, lost);
    return lost;
  }
}

/**
 * Share lost when adding updates to weights stored in `format`, with the update's shares below powers of two read
 * from `shares`: Σ over the weight's binades of P(|w| in [2^e, 2^(e+1))) · share(|Δ| < 2^(e−p)) (SCIENCE.md §1.1; Δ
 * independent of w, so the energy lost is this mixture too), zero weights charged the share below half the smallest
 * subnormal.
 */
function sumLost(weight: MagnitudeProfile, binades: WeightBinades | null, shares: SharesByExponent, format: SwampingFormat): number {
  const p = format.precision;
  const subnormal = format.emin - p;
  const zeros = weight.zeroFraction;
  // a zero weight keeps an update only when it reaches half the smallest subnormal
  let lost = zeros === 0 ? 0 : zeros * shares.at(subnormal);
  if (!(weight.rms > 0) || zeros >= 1 || binades === null) return zeros > 0 ? lost : shares.at(subnormal);
  const { low, under, mass } = binades;
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
 * Share lost when adding updates to weights stored in a format of precision `precision`. `weight` describes the
 * stored weights; `updateBelow(t)` is the update's share with |Δ| < t: of its elements (fractionBelow) for the share of
 * updates lost, of its squared norm (energyBelow) for the energy lost, which {@link SwampingSums} sums.
 */
export function swampedShare(weight: MagnitudeProfile, updateBelow: (t: number) => number, format: SwampingFormat): number {
  const binades = weight.rms > 0 ? weightBinades(weight) : null;
  return sumLost(weight, binades, { at: (k) => updateBelow(2 ** k) }, format);
}
