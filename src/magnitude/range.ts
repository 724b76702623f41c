/**
 * The range of magnitudes the prediction can carry in binary64, and the error that ends a prediction leaving it.
 * Every value a spec gives is bounded (src/spec/limits.ts), but depth compounds them (g^depth): a prediction that
 * leaves this range would otherwise turn into rms 0 or infinity and a verdict built on it.
 */
import type { GraphIssue } from "../graph/types.js";
import type { SpecPath } from "../spec/types.js";
import type { TensorRole } from "./types.js";

/**
 * The mean squares (E[x²]) the magnitude rules carry: 2^-510 to 2^510, rms 2^-255 to 2^255 (about 1.7e-77 to
 * 5.8e76). The rules also square a mean square (fourth moments of norms and sums of squares), which binary64 holds
 * only within 2^-1022 to 2^1023 (IEEE 754-2019 Table 3.5, emin and emax of binary64), hence half its exponent range.
 */
export const CARRIED_MEAN_SQUARE = { min: 2 ** -510, max: 2 ** 510 } as const;

/** Whether a predicted mean square is exactly zero or within {@link CARRIED_MEAN_SQUARE} (false for NaN). */
export function carriedMeanSquare(q: number): boolean {
  return q === 0 || (q >= CARRIED_MEAN_SQUARE.min && q <= CARRIED_MEAN_SQUARE.max);
}

/**
 * A prediction that left the range binary64 carries, caused by the spec's values (its scales, initialisations,
 * multipliers, weight growth, loss): an input error, with the spec path of the tensor's layer in `issues` as
 * CheckInputError has them, so that every command reports it as file:line:column.
 */
export class PredictionRangeError extends RangeError {
  readonly issues: GraphIssue[];
  constructor(issues: GraphIssue[]) {
    super(`the prediction leaves binary64's range: ${issues.map((issue) => issue.message).join("; ")}`);
    this.name = "PredictionRangeError";
    this.issues = issues;
  }
}

/** Where a tensor sits in the network, for the message. */
export interface RangeSite {
  /** the layer's unique name, or "input" / "loss" */
  layer: string;
  role: TensorRole;
  /** the spec node to point at: the layer's, or the key that sets the input or the loss */
  path: SpecPath;
  phase: "start" | "end";
  /** the loss scale the gradients carry */
  lossScale: number;
}

/** The error for a tensor whose mean square `q` left the carried range, naming the spec keys that compound to it. */
export function predictionRangeError(site: RangeSite, q: number): PredictionRangeError {
  const direction = Number.isNaN(q) ? "is not a number" : q > CARRIED_MEAN_SQUARE.max ? `grows to rms ${rmsText(q)}, above 2^255` : `shrinks to rms ${rmsText(q)}, below 2^-255`;
  const forward = site.role === "activation" || site.role === "pre-activation" || site.role === "weight";
  // the keys closest to the tensor first: the loss's for gradients and the loss value, then the forward pass's
  const keys: string[] = [];
  if (!forward && site.phase === "end") keys.push("training.horizon.final-loss");
  if (!forward) keys.push("training.loss (target-scale, reduction)", "training.batch");
  if (!forward && site.lossScale !== 1) keys.push(`the loss scale (${site.lossScale})`);
  keys.push("input.scale", "the init (std, limit, gain), gain and multiplier of the layers up to here");
  if (site.phase === "end") keys.push("training.horizon.weight-growth");
  const when = site.phase === "end" ? " at the end of the horizon" : "";
  const message =
    `the predicted ${site.role === "loss" ? "loss value" : `${site.role} of ${site.layer}`}${when} ${direction}, beyond what the prediction carries in binary64; ` +
    `it compounds ${keys.join(", ")}: check those values`;
  return new PredictionRangeError([{ path: site.path, message }]);
}

function rmsText(q: number): string {
  const rms = Math.sqrt(q);
  return rms === 0 ? "0" : rms === Infinity ? "infinity" : rms.toPrecision(2);
}
