/**
 * Exact sums of short decimals (Σx and Σx² of values written with a few digits after the point,
 * at their decimal value), and the mean and variance of decimals and doubles together, each
 * rounded once from the exact rational (the doubles' sums are exact-sum.ts's).
 */
import { addFractions, roundRatio, toFraction, type ExactMoments, type Fraction } from './exact-sum.js';

/** Largest scale (digits after the point, exponent applied) kept as a decimal. */
export const DECIMAL_MAX_SCALE = 22;
/** Magnitude limit of a decimal's integer mantissa (15 significant digits stay below it). */
export const DECIMAL_MAX_MANTISSA = 2 ** 50;
const TWO26 = 2 ** 26;
const INV_TWO26 = 2 ** -26;
/** Six accumulators per scale: Σm in units 2^26 and 1, Σm² in units 2^78, 2^52, 2^26 and 1. */
const DEC_SLOTS = 6;
/**
 * Every accumulator receives less than 2^27 in magnitude per value (see DecimalSums.add), so its
 * integer sum stays exact (below 2^53) for 2^26 values; empty them into BigInts after 2^25.
 */
const DEC_FLUSH_AFTER = 1 << 25;

/** Serialised DecimalSums: per scale k, Σm and Σm² as decimal integer text. */
export interface SerializedDecimals {
  n: number;
  /** [k, Σm, Σm²] for every scale with a non-zero Σm², by k. */
  sums: [number, string, string][];
}

/**
 * Exact Σx and Σx² of decimal values x = m / 10^k, kept per scale k as integer sums of m and m²
 * (|m| < 2^50, 0 ≤ k ≤ 22). Values are summed at their decimal value, not at their nearest
 * double, so `mean` of 0.1, 0.2 and 0.3 is exactly 0.2 rounded once.
 *
 * The hot path splits m = a·2^26 + b (0 ≤ b < 2^26) and adds integer pieces below 2^26 to plain
 * doubles (exact integer sums), a few multiplications per value with no allocation; BigInts are
 * touched only every 2^25 values and when the figures are read.
 */
export class DecimalSums {
  n = 0;
  private readonly acc = new Float64Array((DECIMAL_MAX_SCALE + 1) * DEC_SLOTS);
  private readonly s1: bigint[] = new Array<bigint>(DECIMAL_MAX_SCALE + 1).fill(0n);
  private readonly s2: bigint[] = new Array<bigint>(DECIMAL_MAX_SCALE + 1).fill(0n);
  private pending = 0;

  /** Adds m / 10^k: m an integer with |m| < 2^50, k an integer in [0, 22]. */
  add(m: number, k: number): void {
    this.n++;
    const acc = this.acc;
    const o = k * DEC_SLOTS;
    const a = Math.floor(m * INV_TWO26); // |a| < 2^24
    const b = m - a * TWO26; // 0 <= b < 2^26
    acc[o] = acc[o]! + a;
    acc[o + 1] = acc[o + 1]! + b;
    // m² = a²·2^52 + 2ab·2^26 + b²; each product is an exact integer below 2^52, cut at 2^26.
    const t0 = b * b;
    const q0 = Math.floor(t0 * INV_TWO26);
    acc[o + 5] = acc[o + 5]! + (t0 - q0 * TWO26);
    acc[o + 4] = acc[o + 4]! + q0;
    if (a !== 0) {
      const t1 = 2 * a * b;
      const q1 = Math.floor(t1 * INV_TWO26);
      acc[o + 4] = acc[o + 4]! + (t1 - q1 * TWO26);
      acc[o + 3] = acc[o + 3]! + q1;
      const t2 = a * a;
      const q2 = Math.floor(t2 * INV_TWO26);
      acc[o + 3] = acc[o + 3]! + (t2 - q2 * TWO26);
      acc[o + 2] = acc[o + 2]! + q2;
    }
    if (++this.pending >= DEC_FLUSH_AFTER) this.flush();
  }

  /** Adds `count` copies of m / 10^k at once (exact BigInt products). */
  addRepeated(m: number, k: number, count: number): void {
    if (count === 0) return;
    this.n += count;
    const bm = BigInt(m);
    const bc = BigInt(count);
    this.s1[k] = this.s1[k]! + bm * bc;
    this.s2[k] = this.s2[k]! + bm * bm * bc;
  }

  private flush(): void {
    const acc = this.acc;
    for (let k = 0; k <= DECIMAL_MAX_SCALE; k++) {
      const o = k * DEC_SLOTS;
      if (acc[o] !== 0 || acc[o + 1] !== 0) {
        this.s1[k] = this.s1[k]! + (BigInt(acc[o]!) << 26n) + BigInt(acc[o + 1]!);
        acc[o] = 0;
        acc[o + 1] = 0;
      }
      if (acc[o + 2] !== 0 || acc[o + 3] !== 0 || acc[o + 4] !== 0 || acc[o + 5] !== 0) {
        this.s2[k] = this.s2[k]! + (BigInt(acc[o + 2]!) << 78n) + (BigInt(acc[o + 3]!) << 52n) + (BigInt(acc[o + 4]!) << 26n) + BigInt(acc[o + 5]!);
        for (let j = 2; j < DEC_SLOTS; j++) acc[o + j] = 0;
      }
    }
    this.pending = 0;
  }

  merge(other: DecimalSums): this {
    this.flush();
    other.flush();
    this.n += other.n;
    for (let k = 0; k <= DECIMAL_MAX_SCALE; k++) {
      this.s1[k] = this.s1[k]! + other.s1[k]!;
      this.s2[k] = this.s2[k]! + other.s2[k]!;
    }
    return this;
  }

  /** Σx and Σx² as exact fractions (denominators 10^K and 10^2K). */
  fractions(): { s1: Fraction; s2: Fraction } {
    this.flush();
    let top = -1;
    for (let k = 0; k <= DECIMAL_MAX_SCALE; k++) if (this.s2[k] !== 0n) top = k;
    if (top < 0) return { s1: { num: 0n, den: 1n }, s2: { num: 0n, den: 1n } };
    let n1 = 0n;
    let n2 = 0n;
    for (let k = 0; k <= top; k++) {
      n1 += this.s1[k]! * 10n ** BigInt(top - k);
      n2 += this.s2[k]! * 10n ** BigInt(2 * (top - k));
    }
    return { s1: { num: n1, den: 10n ** BigInt(top) }, s2: { num: n2, den: 10n ** BigInt(2 * top) } };
  }

  toJSON(): SerializedDecimals {
    this.flush();
    const sums: [number, string, string][] = [];
    for (let k = 0; k <= DECIMAL_MAX_SCALE; k++) if (this.s2[k] !== 0n) sums.push([k, this.s1[k]!.toString(), this.s2[k]!.toString()]);
    return { n: this.n, sums };
  }

  /**
   * Sums gathered elsewhere by the steps of `add` (the statistics module, src/core/stats.wat):
   * `n` values, and accumulators in this class's layout (DEC_SLOTS per scale), each still exact.
   */
  static fromAccumulators(n: number, acc: Float64Array): DecimalSums {
    const d = new DecimalSums();
    d.n = n;
    d.acc.set(acc);
    d.pending = n;
    return d;
  }

  static fromJSON(s: SerializedDecimals): DecimalSums {
    const d = new DecimalSums();
    d.n = s.n;
    for (const [k, a, b] of s.sums) {
      d.s1[k] = BigInt(a);
      d.s2[k] = BigInt(b);
    }
    return d;
  }
}

/**
 * Mean and sample variance of the union of decimal values and binary (double) values, each
 * rounded once from the exact rational: mean = Σx / n, variance = (n·Σx² − (Σx)²) / (n(n − 1)).
 * NaN where undefined (no values; fewer than two for the variance).
 */
export function computeMeanVariance(dec: DecimalSums, bin: ExactMoments): { n: number; mean: number; variance: number } {
  const n = dec.n + bin.n;
  if (n === 0) return { n, mean: NaN, variance: NaN };
  const d = dec.fractions();
  const s1 = addFractions(d.s1, toFraction(bin.s1));
  const s2 = addFractions(d.s2, toFraction(bin.s2));
  const bn = BigInt(n);
  const mean = roundRatio(s1.num, s1.den * bn);
  if (n < 2) return { n, mean, variance: NaN };
  // n·Σx² − (Σx)² over a common denominator; exact, and >= 0 (Cauchy-Schwarz).
  const num = bn * s2.num * s1.den * s1.den - s1.num * s1.num * s2.den;
  const variance = roundRatio(num, s2.den * s1.den * s1.den * bn * BigInt(n - 1));
  return { n, mean, variance };
}
