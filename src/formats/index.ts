/**
 * Public exports of src/formats: the format model, scalar rounding and codecs, and bulk kernels.
 * Every export is documented where it is defined.
 */
export { FORMAT_NAMES, isFormatName, type FormatName } from "./names.js";
export {
  FORMATS,
  MX_BLOCK,
  bytesPerElementText,
  OVERFLOW_MODES,
  getFormat,
  makeFormat,
  pow2,
  resolveOverflow,
  type Format,
  type FormatParameters,
  type OverflowMode,
  type SpecialEncoding,
} from "./model.js";
export {
  ROUNDING_MODES,
  VALUE_CLASSES,
  absoluteError,
  binadeOf,
  bracket,
  classify,
  decode,
  encode,
  encodeBigInt,
  encodeRounded,
  formatCode,
  formatTables,
  isFlushed,
  nanCode,
  nextDown,
  nextUp,
  relativeError,
  roundDetailed,
  roundTo,
  ulp,
  type FormatTables,
  type RoundOptions,
  type RoundResult,
  type RoundingMode,
  type ValueClass,
} from "./round.js";
export {
  BINADE_COUNT,
  BINADE_OFFSET,
  binadeHistogram,
  countClasses,
  decodeArray,
  decodeTable,
  emptyClassCounts,
  encodeArray,
  roundArray,
  roundArrayInPlace,
  type BinadeHistogram,
  type ClassCounts,
  type CodeArray,
  type FloatArray,
} from "./bulk.js";
export { describeRounding, type RoundingDescription } from "./describe.js";
