/** Public exports of src/risk: magnitude profiles judged against formats, operation hazards, verdicts. */
export * from "./types.js";
export * from "./catalogue.js";
export { elementLaw, overDraws, type ElementLaw } from "./laws.js";
export * from "./profile.js";
export * from "./tensor.js";
export { evaluateHazard, hazardVerdict, type HazardContext } from "./hazards.js";
export * from "./verdict.js";
export { VERDICT_RANK } from "./verdict-order.js";
export { plainNumber, percent, binades } from "./words.js";
export * from "./judge.js";
export * from "./find.js";
export * from "./curves.js";
export { blockScaledRisk, type BlockScaledRisk } from "./blocks.js";
