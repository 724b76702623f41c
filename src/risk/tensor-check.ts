/**
 * The tensors of a check result, with their numbers worked out when first read. A check decides every tensor's
 * findings and verdicts at once (src/risk/decide.ts settles most of them by bounds), but most of the numbers beside them
 * (statistics, each format's start, end and worst risks) are read by nobody but a JSON or explain output, or a table of
 * the few tensors at risk: a 1,000-layer check holds 8,000 profiles of them. Here a tensor's `statistics` and a risk's
 * `start`, `end` and `worst` are worked out on their first read, by the same calls the check made before (scaledTensor,
 * scaledTensorNumbers), so every value read, and JSON.stringify of the result, is what working them out at once gave:
 * the calls are pure, and their tables never depend on what was computed before.
 *
 * A tensor's `risks` are made when first read too: a check gathers each format's findings from what it judged, and most
 * tensors' risk objects are read by nobody but JSON (one array, one risk and its `scaleLog2` per format that holds the
 * tensor, and three accessors, set up per object at a runtime call's cost, for each of 4,000 tensors).
 *
 * They are the objects' own enumerable properties (accessors, in the documented order), so the result stays plain data
 * to every reader: JSON, `Object.keys`, a spread, a deep comparison and structuredClone read them as any other field.
 * A field assigned becomes a plain data field. The numbers are worked out from the prediction's profiles (the tensor's
 * `start` and `end`): a caller who changes those before the first read sees the change, as with a prediction's ledgers.
 */
import type { LedgerEntry, MagnitudeProfile, PlanSlot, TensorPrediction, TensorRole } from "../magnitude/types.js";
import type { FormatName } from "../formats/names.js";
import type { LayerFamily } from "../spec/types.js";
import type { TensorCheck, TensorCheckRisk } from "./judge.js";
import { DEFAULT_THRESHOLDS } from "./catalogue.js";
import {
  scaledTensor,
  worstVerdict,
  scaledTensorNumbers,
  type ScaledTensor,
  type TensorProfileRisk,
  type TensorRiskNumbers,
  type TensorRiskOptions,
  type TensorStatistics,
  type WorstRisk,
} from "./tensor.js";
import type { Finding, RangeLimits, RiskThresholds, Verdict } from "./types.js";
import { NO_FINDINGS, noFindings } from "./tensor-finding.js";

// An own enumerable accessor read through `read` (shared by every object, so they keep one layout); assigning the field
// makes it a plain data field. Setting one up is a runtime call, ~0.13–0.18 µs wherever it stands in the constructor:
// a 1,000-layer check's 4,002 tensors spend ~1.3 ms on their two (the judgement without them, plain data no longer,
// read 0.88–0.91×). No cheaper way to an own accessor was found (Dec 2026, Node 20): Object.defineProperties ~2×,
// Reflect.defineProperty and a descriptor without a setter the same, one without a prototype ~1.7×, __defineGetter__
// ~1.6×, and a literal's getters, made afresh per object, leave every object in dictionary mode (~3.5×).
function lazyField<T extends object>(key: string, read: (target: T) => unknown): PropertyDescriptor {
  return {
    get(this: T) {
      return read(this);
    },
    set(this: T, value: unknown) {
      Object.defineProperty(this, key, { value, writable: true, enumerable: true, configurable: true });
    },
    enumerable: true,
    configurable: true,
  };
}

/**
 * A tensor of a check result ({@link TensorCheck}). Its `statistics` are worked out when first read, unless they were
 * given (a data field then); its `risks` are made when first read from the risks the judge added ({@link addDecided},
 * {@link addJudged}), the same objects the judge made before.
 */
export class CheckedTensor implements TensorCheck {
  declare id: string;
  declare layer: string;
  declare layerIndex: number;
  declare family: LayerFamily | "input" | "loss";
  declare role: TensorRole;
  declare slot: PlanSlot;
  declare shape: number[];
  declare source: "predicted" | "measured";
  declare partOf?: string;
  declare start: MagnitudeProfile;
  declare end: MagnitudeProfile;
  declare ledger?: LedgerEntry[];
  declare statistics: TensorStatistics;
  declare risks: TensorCheckRisk[];
  declare verdict: Verdict;
  #tensor: TensorPrediction;
  // the loss scale and thresholds, one record shared by the tensors judged alike (see setupOf)
  #setup: Setup;
  #scaled: ScaledTensor | undefined;
  // the risks added, made into the result's objects when `risks` is first read: the first in the fields below (most
  // tensors are held in one format), the others in #more. #ready: a risk judged from its numbers (a complete object),
  // else null and the first risk is a decided one (#options not null, none added where both are null): the arguments of
  // its CheckedRisk, whose `judged` is its options' and whose verdict is its findings' worst (as the judge decides them)
  #ready: TensorCheckRisk | null;
  #findings: Finding[];
  #limits: RangeLimits | null;
  #options: TensorRiskOptions | null;
  #startOverflow: number;
  #endOverflow: number;
  #more: AddedRisk[] | null;
  #risks: TensorCheckRisk[] | null;

  /**
   * `scaled`: the tensor's scaled profiles and statistics when already worked out (else worked out when first read,
   * as scaledTensor(tensor, lossScale, thresholds)); `ledger`: whether the result keeps the tensor's ledger. The risks
   * and verdict are set by the caller. `counted`: only its findings will be read ({@link CheckedTensor.findingsIn}; a
   * weighed loss scale's count), so the object never reaches a result and its two accessors, each a runtime call to set
   * up, are not.
   */
  constructor(tensor: TensorPrediction, lossScale: number, thresholds: RiskThresholds, scaled: ScaledTensor | undefined, ledger: boolean, counted = false) {
    this.#tensor = tensor;
    this.#setup = setupOf(lossScale, thresholds);
    this.#scaled = scaled;
    this.#ready = null;
    this.#findings = NO_FINDINGS;
    this.#limits = null;
    this.#options = null;
    this.#startOverflow = -1;
    this.#endOverflow = -1;
    this.#more = null;
    this.#risks = null;
    // the keys in the order of TensorCheck (README), `partOf` and `ledger` only where the result has always had them
    this.id = tensor.id;
    this.layer = tensor.layer;
    this.layerIndex = tensor.layerIndex;
    this.family = tensor.family;
    this.role = tensor.role;
    this.slot = tensor.slot;
    this.shape = tensor.shape;
    this.source = tensor.source;
    if (tensor.partOf !== undefined) this.partOf = tensor.partOf;
    this.start = tensor.start;
    this.end = tensor.end;
    if (ledger) this.ledger = tensor.ledger;
    if (!counted) {
      if (scaled === undefined) Object.defineProperty(this, "statistics", STATISTICS);
      else this.statistics = scaled.statistics;
      Object.defineProperty(this, "risks", RISKS);
    }
    this.verdict = "fits";
  }

  /**
   * Adds a risk whose findings were decided without its numbers (its `start`, `end` and `worst` worked out when first
   * read; {@link CheckedRisk}'s arguments). Its `judged` is its options' and its verdict its findings' worst, as the judge
   * decides them (judge.ts judgeTensor), so neither is kept.
   */
  static addDecided(tensor: CheckedTensor, findings: Finding[], limits: RangeLimits, options: TensorRiskOptions, startOverflow: number, endOverflow: number): void {
    if (tensor.#ready === null && tensor.#options === null) {
      tensor.#findings = findings;
      tensor.#limits = limits;
      tensor.#options = options;
      tensor.#startOverflow = startOverflow;
      tensor.#endOverflow = endOverflow;
      return;
    }
    (tensor.#more ??= []).push({ ready: null, findings, limits, options, startOverflow, endOverflow });
  }

  /** Adds a risk judged from its numbers, as it is. */
  static addJudged(tensor: CheckedTensor, risk: TensorCheckRisk): void {
    if (tensor.#ready === null && tensor.#options === null) {
      tensor.#ready = risk;
      return;
    }
    (tensor.#more ??= []).push({ ready: risk, findings: NO_FINDINGS, limits: null, options: null, startOverflow: -1, endOverflow: -1 });
  }

  /** The findings of the tensor's first risk in `format` (none when no risk is in it), without making the risks. */
  static findingsIn(tensor: CheckedTensor, format: FormatName): readonly Finding[] {
    const made = tensor.#risks;
    if (made !== null) {
      for (let i = 0; i < made.length; i++) if ((made[i] as TensorCheckRisk).format === format) return (made[i] as TensorCheckRisk).findings;
      return NO_FINDINGS;
    }
    const ready = tensor.#ready;
    if (ready === null && tensor.#options === null) return NO_FINDINGS;
    if (ready !== null ? ready.format === format : (tensor.#limits as RangeLimits).format === format) return ready !== null ? ready.findings : tensor.#findings;
    const more = tensor.#more;
    if (more !== null) {
      for (let i = 0; i < more.length; i++) {
        const added = more[i] as AddedRisk;
        if (added.ready !== null ? added.ready.format === format : (added.limits as RangeLimits).format === format) return added.ready !== null ? added.ready.findings : added.findings;
      }
    }
    return NO_FINDINGS;
  }

  /** The tensor's risks, made once from those added, in the order they were added. */
  static risks(tensor: CheckedTensor): TensorCheckRisk[] {
    let risks = tensor.#risks;
    if (risks !== null) return risks;
    const more = tensor.#more;
    const options = tensor.#options;
    if (tensor.#ready === null && options === null) risks = [];
    else {
      const first =
        tensor.#ready ??
        decidedRisk(tensor, tensor.#findings, tensor.#limits as RangeLimits, options as TensorRiskOptions, tensor.#startOverflow, tensor.#endOverflow);
      // most tensors are held in one format: a literal of one is the smallest array
      risks = [first];
      if (more !== null) {
      for (let i = 0; i < more.length; i++) {
        const added = more[i] as AddedRisk;
          risks.push(
            added.ready ?? decidedRisk(tensor, added.findings, added.limits as RangeLimits, added.options as TensorRiskOptions, added.startOverflow, added.endOverflow),
          );
        }
      }
    }
    tensor.#risks = risks;
    // the arguments are not needed again
    tensor.#ready = null;
    tensor.#findings = NO_FINDINGS;
    tensor.#more = null;
    return risks;
  }

  /** The tensor's profiles after its loss-scale factor, with their statistics (worked out once). */
  static scaled(tensor: CheckedTensor): ScaledTensor {
    return (tensor.#scaled ??= scaledTensor(tensor.#tensor, tensor.#setup.lossScale, tensor.#setup.thresholds));
  }
}

/** A judgement's loss scale and thresholds, which a tensor keeps to work its numbers out when first read. */
interface Setup {
  readonly lossScale: number;
  readonly thresholds: RiskThresholds;
}

// the record last made: a judgement makes its thousands of tensors at one loss scale and thresholds, so they share one
// (read only; each tensor kept two fields of its own, its loss scale a double box each)
let lastSetup: Setup = { lossScale: Number.NaN, thresholds: DEFAULT_THRESHOLDS };

function setupOf(lossScale: number, thresholds: RiskThresholds): Setup {
  const last = lastSetup;
  if (Object.is(last.lossScale, lossScale) && last.thresholds === thresholds) return last;
  return (lastSetup = { lossScale, thresholds });
}

const STATISTICS = lazyField<CheckedTensor>("statistics", (tensor) => CheckedTensor.scaled(tensor).statistics);
const RISKS = lazyField<CheckedTensor>("risks", (tensor) => CheckedTensor.risks(tensor));

// a decided risk's object (see CheckedTensor.addDecided)
function decidedRisk(tensor: CheckedTensor, findings: Finding[], limits: RangeLimits, options: TensorRiskOptions, startOverflow: number, endOverflow: number): CheckedRisk {
  return new CheckedRisk(options.judged, worstVerdict(findings), ownFindings(findings), tensor, limits, options, startOverflow, endOverflow);
}

/** A risk added after a tensor's first ({@link CheckedTensor.addDecided}, {@link CheckedTensor.addJudged}). */
interface AddedRisk {
  ready: TensorCheckRisk | null;
  findings: Finding[];
  limits: RangeLimits | null;
  options: TensorRiskOptions | null;
  startOverflow: number;
  endOverflow: number;
}

// a risk's own findings array: the one it was decided with, or a fresh empty one for none
function ownFindings(findings: Finding[]): Finding[] {
  return findings === NO_FINDINGS ? noFindings() : findings;
}

/**
 * A tensor's risk in one format ({@link TensorCheckRisk}) whose findings were decided without its numbers: `start`, `end`
 * and `worst` are worked out when first read, as scaledTensorNumbers of the tensor's scaled profiles. For a format
 * without scale factors (`scaleLog2` is then 0 at both ends) at the tensor's own loss scale.
 */
export class CheckedRisk implements TensorCheckRisk {
  declare format: FormatName;
  declare judged: boolean;
  declare scaleLog2: { start: number; end: number };
  declare start: TensorProfileRisk;
  declare end: TensorProfileRisk;
  declare worst: WorstRisk;
  declare verdict: Verdict;
  declare findings: Finding[];
  #tensor: CheckedTensor;
  #limits: RangeLimits;
  #options: TensorRiskOptions;
  #startOverflow: number;
  #endOverflow: number;
  #numbers: TensorRiskNumbers | undefined;

  /**
   * `startOverflow`, `endOverflow`: each side's overflow probability where deciding the findings worked it out (the
   * value its numbers report), else −1.
   */
  constructor(
    judged: boolean,
    verdict: Verdict,
    findings: Finding[],
    tensor: CheckedTensor,
    limits: RangeLimits,
    options: TensorRiskOptions,
    startOverflow: number,
    endOverflow: number,
  ) {
    this.#tensor = tensor;
    this.#limits = limits;
    this.#options = options;
    this.#startOverflow = startOverflow;
    this.#endOverflow = endOverflow;
    this.#numbers = undefined;
    this.format = limits.format;
    this.judged = judged;
    this.scaleLog2 = { start: 0, end: 0 };
    Object.defineProperty(this, "start", START);
    Object.defineProperty(this, "end", END);
    Object.defineProperty(this, "worst", WORST);
    this.verdict = verdict;
    this.findings = findings;
  }

  /** The risk's numbers (worked out once). */
  static numbers(risk: CheckedRisk): TensorRiskNumbers {
    return (risk.#numbers ??= scaledTensorNumbers(CheckedTensor.scaled(risk.#tensor), risk.#limits, risk.#options, risk.#startOverflow, risk.#endOverflow));
  }
}

const START = lazyField<CheckedRisk>("start", (risk) => CheckedRisk.numbers(risk).start);
const END = lazyField<CheckedRisk>("end", (risk) => CheckedRisk.numbers(risk).end);
const WORST = lazyField<CheckedRisk>("worst", (risk) => CheckedRisk.numbers(risk).worst);
