/** Number wording shared by the sentences the risk module writes. */

/**
 * A number in three significant digits, plain where that reads well and in e-notation otherwise.
 * @example plainNumber(0.000123) // => "1.23e-4"
 */
export function plainNumber(x: number): string {
  // a probability of 1 is the commonest number a large check writes (every tensor or sum that surely overflows)
  if (x === 1) return "1";
  if (!Number.isFinite(x)) return x > 0 ? "infinity" : x < 0 ? "-infinity" : "not a number";
  if (x === 0) return "0";
  const magnitude = Math.abs(x);
  const plain = magnitude >= 1e-3 && magnitude < 1e6;
  const n = threeDigits(magnitude);
  if (n === 0) return slowPlainNumber(x, plain);
  const sign = x < 0 ? "-" : "";
  const e = digitsExponent;
  // n·10^(e−2) written from its digits, trailing zeros dropped: the shortest form of the double nearest it, which
  // is what String(Number(x.toPrecision(3))) gives (no shorter decimal rounds to that double)
  if (!plain) return sign + (MANTISSA[n] as string) + (EXPONENTS[e + EXPONENT_OFFSET] as string);
  if (e >= 2) return sign + String(n * (POW10[e - 2] as number));
  if (e === 1) return sign + (TENTHS[n] as string);
  if (e === 0) return sign + (MANTISSA[n] as string);
  return sign + (-e < FRACTION_HEADS.length ? (FRACTION_HEADS[-e] as string) : `0.${"0".repeat(-e - 1)}`) + (STRIPPED[n] as string);
}

/**
 * A number in `digits` significant digits (3 or more), written as {@link plainNumber} writes three: plain from 1e-3
 * up to 1e6, else in e-notation, trailing zeros dropped.
 * @example numberInDigits(15.998, 5) // => "15.998"
 */
export function numberInDigits(x: number, digits: number): string {
  if (digits <= 3 || !Number.isFinite(x) || x === 0) return plainNumber(x);
  const magnitude = Math.abs(x);
  if (magnitude >= 1e-3 && magnitude < 1e6) return String(Number(x.toPrecision(digits)));
  const [mantissa, exponent] = x.toExponential(digits - 1).split("e");
  return `${String(Number(mantissa))}e${Number(exponent)}`;
}

/**
 * A format's limit as a sentence gives it: a whole number below 10^6 in full (binary16's overflow threshold is 65520,
 * which three digits would write as 65500, a value binary16 holds), anything else as {@link plainNumber}.
 * @example limitNumber(65520) // => "65520"; limitNumber(15.998046875) // => "16"
 */
export function limitNumber(x: number): string {
  return Number.isInteger(x) && Math.abs(x) < 1e6 ? String(x) : plainNumber(x);
}

// at most this many significant digits to tell two numbers apart: past it they are equal for any reader's purpose
const MOST_DIGITS = 6;

/**
 * Two numbers a sentence sets side by side (a limit and the prediction it is compared with) in three significant
 * digits, or in as many more as it takes (up to six) for two different numbers not to read the same: "exceeds 16
 * (predicted 16)" would not say which is larger.
 * @example distinctNumbers(15.998, 16.04) // => ["16", "16.04"]
 */
export function distinctNumbers(a: number, b: number): [string, string] {
  let digits = 3;
  let left = plainNumber(a);
  let right = plainNumber(b);
  while (left === right && a !== b && digits < MOST_DIGITS) {
    digits++;
    left = numberInDigits(a, digits);
    right = numberInDigits(b, digits);
  }
  return [left, right];
}

// for n = 100 … 999: its digits without trailing zeros ("12" for 120), as d.dd ("1.2") and as dd.d ("12")
const STRIPPED: string[] = [];
const MANTISSA: string[] = [];
const TENTHS: string[] = [];
for (let n = 100; n < 1000; n++) {
  const digits = String(n).replace(/0+$/, "");
  STRIPPED[n] = digits;
  MANTISSA[n] = digits.length === 1 ? digits : `${digits[0]}.${digits.slice(1)}`;
  TENTHS[n] = digits.length <= 2 ? String(n / 10) : `${digits.slice(0, 2)}.${digits[2]}`;
}

// "e-300" … "e300", the exponents threeDigits leaves (|e| < 300, one more at a decade's edge), and "0.", "0.0", "0.00"
// before the digits of a plain number below 1: each number's words one join of strings made once
const EXPONENT_OFFSET = 300;
const EXPONENTS: readonly string[] = Array.from({ length: 2 * EXPONENT_OFFSET + 1 }, (_, k) => `e${k - EXPONENT_OFFSET}`);
const FRACTION_HEADS: readonly string[] = ["", "0.", "0.0", "0.00"];

// 10^0 … 10^330, correctly rounded (exact up to 10^22)
const POW10: readonly number[] = Array.from({ length: 331 }, (_, k) => Number(`1e${k}`));

// the decimal exponent of the last threeDigits result (a second return value, without an array per call)
let digitsExponent = 0;

/**
 * The three significant digits n (100 ≤ n ≤ 999) of a positive finite number, its decimal exponent left in
 * digitsExponent, rounded to nearest with ties away from zero as Number.prototype.toPrecision(3) rounds
 * (ECMA-262 §21.1.3.5); 0 when the arithmetic below cannot decide that rounding (near a tie, at a decade's edge,
 * or outside 10^±300).
 */
function threeDigits(magnitude: number): number {
  const e = Math.floor(Math.log10(magnitude));
  if (!(e > -300 && e < 300)) return 0;
  // one rounding in the scaling, another in 10^k for |k| > 22: relative error below 3·2^-53, far inside the margin
  const k = 2 - e;
  const scaled = k >= 0 ? magnitude * pow10(k) : magnitude / pow10(-k);
  if (!(scaled >= 100.000001 && scaled < 999.999999)) {
    // at a decade's edge (or log10 one off it): the digits are 100 in this decade or the next
    if (scaled >= 99.9500001 && scaled < 100.000001) {
      digitsExponent = e;
      return 100;
    }
    if (scaled >= 999.999999 && scaled < 1000.4999999) {
      digitsExponent = e + 1;
      return 100;
    }
    return 0;
  }
  const floor = Math.floor(scaled);
  const fraction = scaled - floor;
  if (Math.abs(fraction - 0.5) < 1e-6) return 0;
  const n = fraction > 0.5 ? floor + 1 : floor;
  if (n === 1000) {
    digitsExponent = e + 1;
    return 100;
  }
  digitsExponent = e;
  return n;
}

function pow10(k: number): number {
  return POW10[k] as number;
}

// the direct formatting, for the cases threeDigits leaves undecided
function slowPlainNumber(x: number, plain: boolean): string {
  if (plain) return String(Number(x.toPrecision(3)));
  const [mantissa, exponent] = x.toExponential(2).split("e");
  return `${String(Number(mantissa))}e${Number(exponent)}`;
}

/**
 * A share as a percentage with up to three significant digits; a share below 1 that would read "100%" reads
 * "more than 99.9%".
 * @example percent(0.0123) // => "1.23%"
 */
export function percent(x: number): string {
  const text = plainNumber(x * 100);
  // a share short of all rounds to "100" from 99.95% up: that would read as certainty (common practice)
  return text === "100" && x < 1 ? "more than 99.9%" : `${text}%`;
}

// A modelled share below one in 10^8 is the far tail of a law (a Gaussian's, a draw integral's), read to no useful
// digit: a sentence says only that it is below that floor (display only; results keep the value; common practice)
const SHARE_FLOOR = 1e-8;
const BELOW_SHARE_FLOOR = "less than 1e-6%";

// The per-step probabilities are integrated to 1e-12 absolute below 1e-6 (README, "Estimates"): below 1e-12 their
// digits are not resolved, so a sentence gives only that bound (display only; results keep the value)
const PROBABILITY_FLOOR = 1e-12;

/**
 * A per-step probability as {@link plainNumber} writes it, or "less than 1e-12" below the integration's resolution.
 * @example probabilityWords(6.75e-130) // => "less than 1e-12"; probabilityWords(0.0123) // => "0.0123"
 */
export function probabilityWords(p: number): string {
  return p > 0 && p < PROBABILITY_FLOOR ? "less than 1e-12" : plainNumber(p);
}

/**
 * "less than 1e-6%" for a positive share below the display floor (1e-8), otherwise undefined: for a caller with
 * its own digits for larger shares.
 * @example tinyShare(4e-21) // => "less than 1e-6%"
 */
export function tinyShare(x: number): string | undefined {
  return x > 0 && x < SHARE_FLOOR ? BELOW_SHARE_FLOOR : undefined;
}

/**
 * A modelled share as {@link percent} writes it, or "less than 1e-6%" below the display floor. Thresholds and other
 * given numbers keep `percent`.
 * @example sharePercent(0.0123) // => "1.23%"; sharePercent(4e-21) // => "less than 1e-6%"
 */
export function sharePercent(x: number): string {
  return tinyShare(x) ?? percent(x);
}

/**
 * Words opening a sentence, with a capital: a share can begin one ("more than 99.9%" for a share short of all).
 * @example sentenceStart("more than 99.9%") // => "More than 99.9%"
 */
export function sentenceStart(text: string): string {
  return text.charAt(0).toUpperCase() + text.slice(1);
}

/** Binades with one decimal, e.g. "3.2 binades". */
export function binades(x: number): string {
  const rounded = Math.round(x * 10) / 10;
  return `${rounded === 0 ? "0" : rounded.toFixed(1)} binade${Math.abs(rounded) === 1 ? "" : "s"}`;
}

/** "at the start of training" / "at the end of the horizon" */
export function when(at: "start" | "end"): string {
  return at === "start" ? "at the start of training" : "at the end of the horizon";
}

/**
 * A loss scale: a power of two as `2^k`, anything else as a plain number.
 * @example scaleWords(131072) // => "2^17"
 */
export function scaleWords(scale: number): string {
  const k = Math.log2(scale);
  return Number.isInteger(k) && k !== 0 ? `2^${k}` : plainNumber(scale);
}

/** The sentence a finding carries when its format is not among the formats judged (it is told, not counted). */
export function notCountedSentence(format: string): string {
  return `Not counted in the verdict: ${format} is not among the formats judged.`;
}

/**
 * The same text, held as one string. V8 keeps a string made by concatenation (a template literal's pieces) as a tree of
 * its pieces until a character of it is read, and then flattens it in place into one string (V8's ConsString; engine
 * behaviour, from memory): the result keeps thousands of sentences, each of which would otherwise keep its pieces alive
 * for the collector to copy. Reading the first character flattens it here, once.
 */
export function flat(text: string): string {
  text.charCodeAt(0);
  return text;
}

/**
 * The words of a sentence that do not name its subject, kept for the next sentence of the same wording: the sites and
 * tensors of a network follow each other kind by kind, and most of them share these words (the same format, verdict,
 * side and often number), so their sentences are the subject's name between strings made once (fewer pieces to make
 * and flatten). Keyed by everything the words are made from, compared exactly (a NaN key never holds). The last two
 * kept are held: a network's layers often alternate two kinds of one wording (a dense layer's weight-gradient sum over
 * the batch, then its input-gradient sum over its width), which one would make anew each time.
 */
export class Words {
  // the words kept last, and the ones before them
  private front = new Kept();
  private back = new Kept();

  /** the words of the keys `holds` found or `keep` was given */
  get text(): string {
    return this.front.text;
  }

  /** one more number some words depend on, compared by the caller (that of the words `text` holds) */
  get extra(): number {
    return this.front.extra;
  }

  set extra(value: number) {
    this.front.extra = value;
  }

  /** Whether the words made from these keys are kept; `text` (and `extra`) are then theirs. */
  holds(a: string, b: string, c: string, x: number, y: number, z: number): boolean {
    if (this.front.matches(a, b, c, x, y, z)) return true;
    if (!this.back.matches(a, b, c, x, y, z)) return false;
    this.swap();
    return true;
  }

  keep(a: string, b: string, c: string, x: number, y: number, z: number, text: string): void {
    this.keepPieces(a, b, c, x, y, z, flat(text));
  }

  /**
   * As {@link keep}, but the text kept as the pieces it was joined from: for words few sentences share (keyed by a
   * number that differs from one sentence to the next) joined from pieces that are themselves kept, where flattening
   * would copy every character of each for one or two sentences.
   */
  keepPieces(a: string, b: string, c: string, x: number, y: number, z: number, text: string): void {
    // the words kept last become the ones before, and the older ones make room
    this.swap();
    const kept = this.front;
    kept.a = a;
    kept.b = b;
    kept.c = c;
    kept.x = x;
    kept.y = y;
    kept.z = z;
    kept.extra = Number.NaN;
    kept.text = text;
  }

  private swap(): void {
    const front = this.front;
    this.front = this.back;
    this.back = front;
  }
}

/** One set of words kept by {@link Words}, with the keys they were made from. */
class Kept {
  a = "";
  b = "";
  c = "";
  x = Number.NaN;
  y = Number.NaN;
  z = Number.NaN;
  extra = Number.NaN;
  text = "";

  matches(a: string, b: string, c: string, x: number, y: number, z: number): boolean {
    return this.a === a && this.b === b && this.c === c && this.x === x && this.y === y && this.z === z;
  }
}
