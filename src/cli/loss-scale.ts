import { lossScaleProblem } from "../spec/limits.js";
import { UserError } from "./errors.js";

/**
 * `--loss-scale`: the spec's rule for `loss-scale` (src/spec/checks.ts), so a flag and a spec accept the same
 * values: a power of two, so scaling and unscaling are exact (Micikevicius et al. 2018 §3.2), inside binary32's
 * normal range 2^-126 to 2^127 (IEEE 754-2019 Table 3.5), where the scaled loss is computed.
 */
export function parseLossScale(text: string | undefined): number | undefined {
  if (text === undefined) return undefined;
  // "2^-22" as every output writes a scale (a pick below 2^-14 is otherwise a 16-digit decimal to copy)
  const power = /^2\^([+-]?\d{1,4})$/.exec(text.trim());
  const value = power ? 2 ** Number(power[1]) : Number(text);
  if (!(value > 0) || !Number.isFinite(value) || 2 ** Math.round(Math.log2(value)) !== value) {
    throw new UserError(`--loss-scale: expected a power of two such as 1024 or 0.5, got "${text}"`);
  }
  // past the power-of-two test above, the rule the spec and the library share gives only the range's message
  const problem = lossScaleProblem(value);
  if (problem !== undefined) throw new UserError(`--loss-scale: ${problem}, got "${text}"`);
  return value;
}
