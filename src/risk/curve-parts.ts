/**
 * What the loss-scale curves of src/risk/curves.ts are computed from, without their memos: for the window's search
 * (src/scale/window.ts keeps values and bounds itself). Internal to the risk and scale modules: not re-exported by
 * src/risk/index.ts.
 */
import { pow2 } from "../formats/index.js";
import type { MagnitudeProfile, TensorPrediction } from "../magnitude/types.js";
import { DRAWS, ProfileDrawBounds } from "./bounds.js";
import { riskProfile, sameDistribution } from "./profile.js";
import { isGradientRole } from "./tensor-finding.js";
import type { RangeLimits } from "./types.js";

/** What a gradient tensor's loss-scale curves are computed from: its start and end profiles (one object when alike). */
export interface LossScaleCurveParts {
  id: string;
  start: MagnitudeProfile;
  end: MagnitudeProfile;
  /** true when start and end have one distribution (end is then start) */
  same: boolean;
  edgeGuessesLog2: { overflow: number; flush: number };
  /** the cheap bounds of {@link LossScaleCurves}, not memoised */
  overflowRiskBounds(log2Scale: number): readonly [number, number];
  flushedEnergyBounds(log2Scale: number): readonly [number, number];
  /** the cheap bounds into `into` at `at` (low) and `at + 1` (high), without an array per call */
  overflowRiskBoundsInto(log2Scale: number, into: Float64Array, at: number): void;
  flushedEnergyBoundsInto(log2Scale: number, into: Float64Array, at: number): void;
}

/**
 * A gradient tensor's profiles in the one layout the risk functions read (riskProfile), with their extreme-draw bounds:
 * what the curves take of a tensor whatever the format's limits, made once per answer and shared by its formats (the
 * gradient format and bfloat16's remedy) and the dynamic-scale simulation's ends of the horizon.
 */
export interface GradientProfiles {
  readonly tensor: TensorPrediction;
  readonly start: MagnitudeProfile;
  readonly end: MagnitudeProfile;
  /** true when start and end have one distribution (end is then start) */
  readonly same: boolean;
  /** the profiles' extreme-draw bounds (made when first asked: the searches ask few of them, most tensors' never) */
  readonly startBounds: ProfileDrawBounds;
  readonly endBounds: ProfileDrawBounds;
}

/** The {@link GradientProfiles} of every gradient tensor (activation and weight gradients) with a nonzero rms, in order. */
export function gradientProfiles(tensors: readonly TensorPrediction[]): GradientProfiles[] {
  let n = 0;
  for (const tensor of tensors) if (isCurved(tensor)) n++;
  // every profile's draws in one array (ProfileDrawBounds), start and end side by side
  const draws = new Float64Array(2 * DRAWS * n);
  const out: GradientProfiles[] = [];
  for (const tensor of tensors) if (isCurved(tensor)) out.push(profilesIn(tensor, draws, 2 * DRAWS * out.length));
  return out;
}

// the role by comparison (isGradientRole), not GRADIENT_ROLES.includes: the builtin's call, twice for each of a check's
// ~4,000 tensors, made gradientProfiles ~10–30% slower on the 1,000-layer spec
function isCurved(tensor: TensorPrediction): boolean {
  return isGradientRole(tensor.role) && (tensor.start.rms > 0 || tensor.end.rms > 0);
}

/** One tensor's {@link GradientProfiles}, whatever its role. */
export function profilesOf(tensor: TensorPrediction): GradientProfiles {
  return profilesIn(tensor, new Float64Array(2 * DRAWS), 0);
}

// profilesOf with the draws of its start at `draws[at …]` and of its end after them
function profilesIn(tensor: TensorPrediction, draws: Float64Array, at: number): GradientProfiles {
  // the risk functions see profiles of one layout (riskProfile), whatever fields the prediction carried (the
  // prediction's own objects, which would save the copies, made the answer ~10% slower at growth 1.1: the window's and
  // the simulation's laws then read two layouts)
  const same = sameDistribution(tensor.start, tensor.end);
  const start = riskProfile(tensor.start);
  return new Profiles(tensor, start, same ? start : riskProfile(tensor.end), same, draws, at);
}

// A tensor's GradientProfiles, its extreme-draw bounds made on first use (each the same numbers, at its place in the
// shared array): the window's searches take the tighter bounds of most tensors first, and an answer kept two bound
// objects per tensor alive through its searches (~0.35 MB of each growth-1.1 check) that few were asked of.
class Profiles implements GradientProfiles {
  private startDraws: ProfileDrawBounds | undefined = undefined;
  private endDraws: ProfileDrawBounds | undefined = undefined;

  constructor(
    readonly tensor: TensorPrediction,
    readonly start: MagnitudeProfile,
    readonly end: MagnitudeProfile,
    readonly same: boolean,
    private readonly draws: Float64Array,
    private readonly at: number,
  ) {}

  get startBounds(): ProfileDrawBounds {
    return (this.startDraws ??= new ProfileDrawBounds(this.start, this.draws, this.at));
  }

  get endBounds(): ProfileDrawBounds {
    if (this.same) return this.startBounds;
    return (this.endDraws ??= new ProfileDrawBounds(this.end, this.draws, this.at + DRAWS));
  }
}

/**
 * The parts of the loss-scale curves of every gradient tensor (activation and weight gradients) held in a format,
 * for callers that keep values and bounds themselves (the window's search does): {@link lossScaleCurves} without its
 * memos. `profiles`, when given, are the tensors' {@link gradientProfiles}, made once for several formats.
 */
export function lossScaleCurveParts(
  tensors: readonly TensorPrediction[],
  limits: RangeLimits,
  profiles: readonly GradientProfiles[] = gradientProfiles(tensors),
): LossScaleCurveParts[] {
  return curvePartsOf(profiles, limits, (p, edgeGuessesLog2) => new CurveParts(p, edgeGuessesLog2, limits));
}

/**
 * Each profile's curve parts as `make` builds them from its profiles and its edge guesses (a {@link CurveParts} or a
 * class extending it, one object per tensor), in order.
 */
export function curvePartsOf<T>(
  profiles: readonly GradientProfiles[],
  limits: RangeLimits,
  make: (profiles: GradientProfiles, edgeGuessesLog2: { overflow: number; flush: number }, index: number) => T,
): T[] {
  const overflowLog2 = Math.log2(limits.overflowLevel);
  const flushLog2 = Math.log2(limits.flushBound);
  const guesses = new Map<number, { overflow: number; flush: number }>();
  const numbers = guessNumbers(profiles);
  return profiles.map((p, i) => {
    const overflow = Math.floor(overflowLog2 - (numbers[3 * i] as number) - 2 - 3 * (numbers[3 * i + 2] as number));
    const flush = Math.ceil(flushLog2 - (numbers[3 * i + 1] as number) + 4 + 3 * (numbers[3 * i + 2] as number));
    // one object per pair of guesses, shared by the tensors that have it (a stack of alike layers has a few pairs for
    // thousands of tensors; nothing writes the guesses), keyed exactly where both are whole numbers of modest size (and
    // not −0, which a key would take for 0)
    const key =
      Math.abs(overflow) < GUESS_KEY && Math.abs(flush) < GUESS_KEY && !Object.is(overflow, -0) && !Object.is(flush, -0) ? overflow * 2 * GUESS_KEY + flush : NaN;
    let edgeGuessesLog2 = key === key ? guesses.get(key) : undefined;
    if (edgeGuessesLog2 === undefined) {
      edgeGuessesLog2 = { overflow, flush };
      if (key === key) guesses.set(key, edgeGuessesLog2);
    }
    return make(p, edgeGuessesLog2, i);
  });
}
// the guesses' key: overflow·2^21 + flush, exact (and one key per pair) for whole guesses under 2^20 in size
const GUESS_KEY = 2 ** 20;

// What the edge guesses take of each tensor's profiles, whatever the format, at 3i … 3i + 2: log2 of the larger rms and
// of the smaller positive one (1 where there is none), and the wider spread (at least 0); worked out once per set of
// profiles, which serve every format an answer searches
function guessNumbers(profiles: readonly GradientProfiles[]): Float64Array {
  let numbers = GUESS_NUMBERS.get(profiles);
  if (numbers !== undefined) return numbers;
  numbers = new Float64Array(3 * profiles.length);
  for (let i = 0; i < profiles.length; i++) {
    const { start, end } = profiles[i] as GradientProfiles;
    // the largest elements sit a few rms above the rms, more for a spread scale; the flushed energy matters
    // once the bound comes within a few binades of the rms (rough: only the search's starting point)
    numbers[3 * i] = Math.log2(Math.max(start.rms, end.rms) > 0 ? Math.max(start.rms, end.rms) : 1);
    numbers[3 * i + 1] = Math.log2(Math.min(start.rms || end.rms, end.rms || start.rms) || 1);
    numbers[3 * i + 2] = Math.max(start.log2Spread, end.log2Spread, 0);
  }
  GUESS_NUMBERS.set(profiles, numbers);
  return numbers;
}
const GUESS_NUMBERS = new WeakMap<readonly GradientProfiles[], Float64Array>();

/**
 * One tensor's parts: its profiles and their extreme-draw bounds, shared (GradientProfiles), read through that object
 * rather than copied onto this one: an answer keeps one of these per tensor and format (~4,000) alive through its
 * searches, and each field more is bytes every scavenge during them copies.
 */
export class CurveParts implements LossScaleCurveParts {
  constructor(
    protected readonly parts: GradientProfiles,
    readonly edgeGuessesLog2: { overflow: number; flush: number },
    protected readonly limits: RangeLimits,
  ) {}

  get id(): string {
    return this.parts.tensor.id;
  }
  // the profiles the curves are made from (src/scale/window.ts ScaledTensorCurves.source): one per tensor, whose id
  // is the parts' tensor's
  get source(): GradientProfiles {
    return this.parts;
  }
  get start(): MagnitudeProfile {
    return this.parts.start;
  }
  get end(): MagnitudeProfile {
    return this.parts.end;
  }
  get same(): boolean {
    return this.parts.same;
  }

  // every law scales with the profile, bound included: the profile scaled by 2^k against t is the profile against
  // t·2^−k, exactly (powers of two), without a scaled copy per exponent
  overflowRiskBounds(k: number): readonly [number, number] {
    this.overflowRiskBoundsInto(k, BOTH, 0);
    return [BOTH[0]!, BOTH[1]!];
  }

  flushedEnergyBounds(k: number): readonly [number, number] {
    this.flushedEnergyBoundsInto(k, BOTH, 0);
    return [BOTH[0]!, BOTH[1]!];
  }

  overflowRiskBoundsInto(k: number, into: Float64Array, at: number): void {
    const level = this.limits.overflowLevel * pow2Below(k);
    const parts = this.parts;
    parts.startBounds.anyAboveInto(level, BOTH, 2);
    if (parts.same) {
      BOTH[4] = BOTH[2]!;
      BOTH[5] = BOTH[3]!;
    } else parts.endBounds.anyAboveInto(level, BOTH, 4);
    into[at] = Math.max(BOTH[2]!, BOTH[4]!);
    into[at + 1] = Math.max(BOTH[3]!, BOTH[5]!);
  }

  flushedEnergyBoundsInto(k: number, into: Float64Array, at: number): void {
    const level = this.limits.flushBound * pow2Below(k);
    // the worse of two values lies between the worse of their lower and the worse of their upper bounds
    const parts = this.parts;
    parts.startBounds.energyBelowInto(level, BOTH, 2);
    if (parts.same) {
      BOTH[4] = BOTH[2]!;
      BOTH[5] = BOTH[3]!;
    } else parts.endBounds.energyBelowInto(level, BOTH, 4);
    into[at] = Math.max(BOTH[2]!, BOTH[4]!);
    into[at + 1] = Math.max(BOTH[3]!, BOTH[5]!);
  }
}

// the start's bounds at 2 and 3, the end's at 4 and 5, and the array-returning methods' result at 0 and 1, before
// they are copied out
const BOTH = new Float64Array(6);

/**
 * 2^−k: from the formats' table of powers for a whole exponent (the window and the answer's curves ask their bounds at a
 * few exponents for every tensor, and a power with a variable exponent costs a call, Math.pow), the same double 2 ** -k
 * gives.
 */
export function pow2Below(k: number): number {
  return Number.isInteger(k) ? pow2(-k) : 2 ** -k;
}
