/**
 * Exact sums of doubles, and the moments (n, Σx, Σx²) built on them; the exact sums of short
 * decimals are decimal-sums.ts's.
 *
 * A value is held as a floating-point expansion: a list of doubles, non-overlapping and in increasing
 * magnitude, whose exact (unrounded) sum is the value. The primitives are the error-free
 * transformations of Shewchuk, "Adaptive Precision Floating-Point Arithmetic and Fast Robust
 * Geometric Predicates" (Discrete & Computational Geometry 18, 1997): two-sum, fast-two-sum,
 * two-product through Veltkamp/Dekker splitting, grow-expansion, scale-expansion and compress, all
 * with zero elimination.
 *
 * Why exact: the manifest must be byte-identical whatever the thread count, chunking or memory
 * budget. Welford updates and Chan-Golub-LeVeque merges round at every step, so their last bits
 * depend on the order in which chunks meet. An exact sum has no order at all: merging is adding
 * expansions, which is associative and commutative, and `approx()` rounds the exact value
 * correctly (to nearest, ties to even), so the double it returns depends on the value only, never
 * on how the value was reached.
 *
 * Range: two-product is exact while |x·y| stays well inside the double range (|x|, |y| < 2^996 for
 * the split, no overflow of the product) and its rounding error is not subnormal (|x·y| > 2^-969
 * or so). Below that the low part loses bits, but deterministically per value, so results stay
 * order-independent. Callers that may see huge values (see ExactMoments) must guard them.
 */

/** 2^27 + 1: Veltkamp's constant that splits a 53-bit significand into two 26-bit halves. */
const SPLITTER = 134217729;

/** Grow the expansion past this many terms, then compress it back (usually to 2 or 3 terms). */
const COMPRESS_AT = 12;

/** Work space for compress(), shared (single-threaded within one isolate). */
let compressScratch = new Float64Array(64);

export class ExactSum {
  /** Terms, increasing magnitude, non-overlapping, no zeros. Only the first `m` are live. */
  private t: Float64Array;
  private m = 0;

  constructor(capacity = 16) {
    this.t = new Float64Array(Math.max(4, capacity));
  }

  /** Number of live terms (after zero elimination; not canonical, see `terms()`). */
  get length(): number {
    return this.m;
  }

  /** True when the exact value is zero. */
  isZero(): boolean {
    return this.m === 0;
  }

  /** Adds x exactly (Shewchuk's grow-expansion with zero elimination, in place). */
  add(x: number): this {
    if (x === 0) return this;
    if (this.m + 1 > this.t.length) this.growCapacity(this.m + 1);
    const t = this.t;
    const m = this.m;
    let q = x;
    let k = 0;
    for (let i = 0; i < m; i++) {
      const e = t[i]!;
      // two-sum(q, e) = (s, err) with s + err === q + e exactly
      const s = q + e;
      const bv = s - q;
      const err = q - (s - bv) + (e - bv);
      q = s;
      if (err !== 0) t[k++] = err;
    }
    if (q !== 0) t[k++] = q;
    this.m = k;
    if (k > COMPRESS_AT) this.compress();
    return this;
  }

  /** Adds the exact product x·y (two-product: the rounded product plus its exact rounding error). */
  addProduct(x: number, y: number): this {
    const p = x * y;
    let c = SPLITTER * x;
    const xhi = c - (c - x);
    const xlo = x - xhi;
    c = SPLITTER * y;
    const yhi = c - (c - y);
    const ylo = y - yhi;
    const err = xlo * ylo - (p - xhi * yhi - xlo * yhi - xhi * ylo);
    this.add(err);
    this.add(p);
    return this;
  }

  /** Adds x² exactly (two-product specialised to a square: one split instead of two). */
  addSquare(x: number): this {
    const p = x * x;
    const c = SPLITTER * x;
    const hi = c - (c - x);
    const lo = x - hi;
    const err = lo * lo - (p - hi * hi - (hi + hi) * lo);
    this.add(err);
    this.add(p);
    return this;
  }

  /** Adds another expansion's value exactly. The other is left unchanged. */
  merge(other: ExactSum): this {
    const o = other.t;
    // Smallest first: the small terms settle at the bottom, which keeps the result short.
    for (let i = 0, n = other.m; i < n; i++) this.add(o[i]!);
    return this;
  }

  /** Subtracts another expansion's value exactly. */
  subtract(other: ExactSum): this {
    const o = other.t;
    for (let i = 0, n = other.m; i < n; i++) this.add(-o[i]!);
    return this;
  }

  /** Flips the sign, exactly. */
  negate(): this {
    for (let i = 0; i < this.m; i++) this.t[i] = -this.t[i]!;
    return this;
  }

  /**
   * Multiplies by the double b exactly, in place (scale-expansion with zero elimination). b is
   * typically an integer count; any finite double inside the two-product range works.
   */
  scale(b: number): this {
    const m = this.m;
    if (m === 0) return this;
    if (b === 0) {
      this.m = 0;
      return this;
    }
    const e = this.t.slice(0, m);
    if (2 * m > this.t.length) this.growCapacity(2 * m);
    const h = this.t;
    let c = SPLITTER * b;
    const bhi = c - (c - b);
    const blo = b - bhi;
    let k = 0;
    // two-product(e[0], b)
    let a = e[0]!;
    let q = a * b;
    c = SPLITTER * a;
    let ahi = c - (c - a);
    let alo = a - ahi;
    let hh = alo * blo - (q - ahi * bhi - alo * bhi - ahi * blo);
    if (hh !== 0) h[k++] = hh;
    for (let i = 1; i < m; i++) {
      a = e[i]!;
      const p1 = a * b;
      c = SPLITTER * a;
      ahi = c - (c - a);
      alo = a - ahi;
      const p0 = alo * blo - (p1 - ahi * bhi - alo * bhi - ahi * blo);
      // two-sum(q, p0)
      const s = q + p0;
      let bv = s - q;
      hh = q - (s - bv) + (p0 - bv);
      if (hh !== 0) h[k++] = hh;
      // fast-two-sum(p1, s): |p1| >= |s| holds here (Shewchuk, Theorem 19)
      q = p1 + s;
      bv = q - p1;
      hh = s - bv;
      if (hh !== 0) h[k++] = hh;
    }
    if (q !== 0) h[k++] = q;
    this.m = k;
    if (k > COMPRESS_AT) this.compress();
    return this;
  }

  /** Returns a new expansion holding the exact product of this and other. */
  multiply(other: ExactSum): ExactSum {
    const out = new ExactSum(Math.max(16, 2 * this.m + 2));
    const part = new ExactSum(2 * this.m + 2);
    const o = other.t;
    for (let j = 0; j < other.m; j++) {
      part.setFrom(this);
      part.scale(o[j]!);
      out.merge(part);
    }
    return out.compress();
  }

  /** Copies another expansion's terms into this one. */
  setFrom(other: ExactSum): this {
    if (other.m > this.t.length) this.growCapacity(other.m);
    this.t.set(other.t.subarray(0, other.m));
    this.m = other.m;
    return this;
  }

  /** Independent copy. */
  clone(): ExactSum {
    return new ExactSum(this.m + 4).setFrom(this);
  }

  /** Sets the value to zero. */
  clear(): this {
    this.m = 0;
    return this;
  }

  /**
   * Shewchuk's Compress: same value, fewer terms (the largest term then approximates the value to
   * within about one unit in the last place). Representation only; the value does not change.
   */
  compress(): this {
    const m = this.m;
    if (m <= 1) return this;
    const e = this.t;
    if (compressScratch.length < m) compressScratch = new Float64Array(m * 2);
    const g = compressScratch;
    let bottom = m - 1;
    let q = e[m - 1]!;
    for (let i = m - 2; i >= 0; i--) {
      const enow = e[i]!;
      const qn = q + enow;
      const small = enow - (qn - q);
      if (small !== 0) {
        g[bottom--] = qn;
        q = small;
      } else {
        q = qn;
      }
    }
    g[bottom] = q;
    let top = 0;
    for (let i = bottom + 1; i < m; i++) {
      const gnow = g[i]!;
      const qn = gnow + q;
      const small = q - (qn - gnow);
      if (small !== 0) e[top++] = small;
      q = qn;
    }
    if (q !== 0) e[top++] = q;
    this.m = top;
    return this;
  }

  /**
   * The value rounded to the nearest double, ties to even. This depends on the exact value only,
   * not on its representation, which is what makes merged results bit-identical. Same rounding
   * walk as the one used for correctly rounded summation over non-overlapping partials
   * (largest term down; at the first inexact step, fix up a half-way case using the sign of the
   * terms below).
   */
  approx(): number {
    let n = this.m;
    if (n === 0) return 0;
    const p = this.t;
    let hi = p[--n]!;
    let lo = 0;
    while (n > 0) {
      const x = hi;
      const y = p[--n]!;
      hi = x + y;
      const yr = hi - x;
      lo = y - yr;
      if (lo !== 0) break;
    }
    if (n > 0 && ((lo < 0 && p[n - 1]! < 0) || (lo > 0 && p[n - 1]! > 0))) {
      const y = lo * 2;
      const x = hi + y;
      const yr = x - hi;
      if (y === yr) hi = x;
    }
    return hi;
  }

  /**
   * The canonical terms of the value, largest first: each is the correctly rounded value of what
   * the previous ones leave over. Equal values give equal arrays whatever their history, so these
   * serialise deterministically.
   */
  terms(): number[] {
    const out: number[] = [];
    const rest = this.clone().compress();
    while (!rest.isZero()) {
      const r = rest.approx();
      out.push(r);
      if (!Number.isFinite(r)) break; // overflowed input: nothing exact is left to take apart
      rest.add(-r);
      rest.compress();
    }
    return out;
  }

  /** Rebuilds an expansion from any list of doubles whose exact sum is the value. */
  static fromTerms(terms: ArrayLike<number>): ExactSum {
    const s = new ExactSum(terms.length + 4);
    for (let i = terms.length - 1; i >= 0; i--) s.add(terms[i]!);
    return s;
  }

  toJSON(): number[] {
    return this.terms();
  }

  static fromJSON(terms: ArrayLike<number>): ExactSum {
    return ExactSum.fromTerms(terms);
  }

  private growCapacity(need: number): void {
    let cap = this.t.length * 2;
    while (cap < need) cap *= 2;
    const nt = new Float64Array(cap);
    nt.set(this.t.subarray(0, this.m));
    this.t = nt;
  }
}

// --- binned front buffer ---------------------------------------------------------------------

/** Bin j counts units of 2^(32j − 1074); 66 bins cover every finite double's bits. */
const BIN_COUNT = 66;
/**
 * Each addToBins call puts at most one piece (< 2^32) into a bin, so 2^21 calls keep every bin
 * below 2^53. ExactMoments makes two calls per value on its Σx² bins: flush after 2^20 values.
 */
const BIN_FLUSH_AFTER = 1 << 20;
const TWO32 = 2 ** 32;
const INV_TWO32 = 2 ** -32;
/** 2^(32j − 1074) for each bin. */
const BIN_UNIT = Float64Array.from({ length: BIN_COUNT }, (_, j) => 2 ** (32 * j - 1074));
/** 2^(1074 − 32j) split in two factors so each is a finite double (2^1074 is not). */
const BIN_SCALE_A = Float64Array.from({ length: BIN_COUNT }, (_, j) => 2 ** Math.ceil((1074 - 32 * j) / 2));
const BIN_SCALE_B = Float64Array.from({ length: BIN_COUNT }, (_, j) => 2 ** Math.floor((1074 - 32 * j) / 2));
const bitsF64 = new Float64Array(1);
const bitsU32 = new Uint32Array(bitsF64.buffer);
const HI_WORD = new Uint8Array(new Uint16Array([1]).buffer)[0] === 1 ? 1 : 0; // little-endian: high word at [1]

/**
 * The fast exact accumulator of the hot path (a "superaccumulator" on a fixed binary grid): x is
 * cut at fixed 32-bit boundaries of the binary exponent into three integer pieces (each < 2^32 in
 * units of its bin), each added to the bin for its position, bins[offset + j]. Integer sums below
 * 2^53 are exact, so the bins hold the exact sum until some bin could pass 2^53 (after 2^21 adds;
 * callers empty them every 2^20). About 3x cheaper per value than growing an expansion.
 * Valid while the pieces times their units stay finite: |x| <= 2^900.
 */
function addToBins(bins: Float64Array, offset: number, x: number): void {
  if (x === 0) return;
  bitsF64[0] = x;
  const biased = (bitsU32[HI_WORD]! >>> 20) & 0x7ff;
  // Position of the lowest significand bit, counted from 2^-1074.
  const low = biased === 0 ? 0 : biased - 1;
  const j = low >>> 5;
  // w = x / 2^(32j − 1074): an integer below 2^85, exact (a power-of-two scaling).
  const w = x * BIN_SCALE_A[j]! * BIN_SCALE_B[j]!;
  const t1 = Math.trunc(w * INV_TWO32);
  const lo = w - t1 * TWO32;
  const hi = Math.trunc(t1 * INV_TWO32);
  const mid = t1 - hi * TWO32;
  const k = offset + j;
  bins[k] = bins[k]! + lo;
  bins[k + 1] = bins[k + 1]! + mid;
  bins[k + 2] = bins[k + 2]! + hi;
}

/** Moves the exact contents of bins[offset .. offset + BIN_COUNT) into `into` and zeroes them. */
function flushBins(bins: Float64Array, offset: number, into: ExactSum): void {
  for (let j = 0; j < BIN_COUNT; j++) {
    const b = bins[offset + j]!;
    if (b !== 0) {
      into.add(b * BIN_UNIT[j]!); // exact: an integer below 2^53 times a power of two
      bins[offset + j] = 0;
    }
  }
}

// --- moments ---------------------------------------------------------------------------------

/** Serialised ExactMoments: plain numbers only, safe for postMessage and JSON. */
export interface SerializedMoments {
  n: number;
  s1: number[];
  s2: number[];
}

/** Magnitude up to which values go through the binned fast path (x² must stay far from overflow). */
const BINNED_LIMIT = 2 ** 450;

/**
 * Count, Σx and Σx², all exact. Merging adds the three, so any split of the data merged in any
 * order yields the same state and the same mean/variance bits.
 */
export class ExactMoments {
  n = 0;
  private readonly e1 = new ExactSum();
  private readonly e2 = new ExactSum();
  /** Σx bins at [0, BIN_COUNT), Σx² bins at [BIN_COUNT, 2·BIN_COUNT); see addToBins. */
  private readonly bins = new Float64Array(2 * BIN_COUNT);
  private pending = 0;

  add(x: number): this {
    this.n++;
    // x² as p + err exactly (two-product of x with itself, Veltkamp split).
    const p = x * x;
    const c = SPLITTER * x;
    const hi = c - (c - x);
    const lo = x - hi;
    const err = lo * lo - (p - hi * hi - (hi + hi) * lo);
    if (x <= BINNED_LIMIT && x >= -BINNED_LIMIT) {
      const bins = this.bins;
      addToBins(bins, 0, x);
      addToBins(bins, BIN_COUNT, p);
      addToBins(bins, BIN_COUNT, err); // a second add to the Σx² bins: flush after 2^20 values
      if (++this.pending >= BIN_FLUSH_AFTER) this.flush();
    } else {
      this.e1.add(x);
      this.e2.add(err).add(p);
    }
    return this;
  }

  private flush(): void {
    flushBins(this.bins, 0, this.e1);
    flushBins(this.bins, BIN_COUNT, this.e2);
    this.pending = 0;
  }

  /** Σx, exact. */
  get s1(): ExactSum {
    if (this.pending > 0) this.flush();
    return this.e1;
  }

  /** Σx², exact. */
  get s2(): ExactSum {
    if (this.pending > 0) this.flush();
    return this.e2;
  }

  merge(other: ExactMoments): this {
    this.n += other.n;
    this.s1.merge(other.s1);
    this.s2.merge(other.s2);
    return this;
  }

  /** approx(Σx) / n; NaN when empty. */
  mean(): number {
    return this.n === 0 ? NaN : this.s1.approx() / this.n;
  }

  /**
   * Sample variance (n − 1 denominator): the numerator n·Σx² − (Σx)² is formed exactly and
   * rounded once, then divided by n(n − 1). NaN for fewer than two values.
   */
  variance(): number {
    const n = this.n;
    if (n < 2) return NaN;
    const s1 = this.s1;
    const num = this.s2.clone().scale(n).subtract(s1.multiply(s1));
    // The exact numerator is >= 0 (Cauchy-Schwarz), so its rounding is too.
    return num.approx() / (n * (n - 1));
  }

  /** Sample standard deviation, sqrt(variance()). */
  sd(): number {
    return Math.sqrt(this.variance());
  }

  toJSON(): SerializedMoments {
    return { n: this.n, s1: this.s1.terms(), s2: this.s2.terms() };
  }

  static fromJSON(s: SerializedMoments): ExactMoments {
    const m = new ExactMoments();
    m.n = s.n;
    m.e1.setFrom(ExactSum.fromTerms(s.s1));
    m.e2.setFrom(ExactSum.fromTerms(s.s2));
    return m;
  }
}

// --- classic streaming moments, for comparison ---------------------------------------------------

/** Count, mean and M2 = Σ(x − mean)², as kept by Welford's update. */
export interface RunningMoments {
  n: number;
  mean: number;
  m2: number;
}

/**
 * Welford's one-value update (Welford 1962, Technometrics 4(3):419-420), in place. Accurate, but its
 * rounding depends on the order of the values; rowdeck's manifests use ExactMoments instead.
 */
export function welfordAdd(s: RunningMoments, x: number): RunningMoments {
  s.n += 1;
  const d = x - s.mean;
  s.mean += d / s.n;
  s.m2 += d * (x - s.mean);
  return s;
}

/**
 * Chan, Golub & LeVeque's pairwise merge (STAN-CS-79-773, 1979). Returns a new state. Not
 * associative in floating point: merging the same chunks in another order changes the last bits.
 */
export function chanMerge(a: RunningMoments, b: RunningMoments): RunningMoments {
  const n = a.n + b.n;
  if (n === 0) return { n: 0, mean: 0, m2: 0 };
  if (a.n === 0) return { ...b };
  if (b.n === 0) return { ...a };
  const d = b.mean - a.mean;
  return { n, mean: a.mean + (d * b.n) / n, m2: a.m2 + b.m2 + (d * d * a.n * b.n) / n };
}

/** Sample variance from a running state (M2 / (n − 1)); NaN for fewer than two values. */
export function computeRunningVariance(s: RunningMoments): number {
  return s.n < 2 ? NaN : s.m2 / (s.n - 1);
}

// --- exact rationals, rounded once -------------------------------------------------------------

/** A rational number num / den with den > 0 (not reduced: only ever rounded). */
export interface Fraction {
  num: bigint;
  den: bigint;
}

function bitLength(a: bigint): number {
  return a === 0n ? 0 : a.toString(2).length;
}

const f64Bits = new Float64Array(1);
const u64Bits = new BigUint64Array(f64Bits.buffer);

/** A finite double as mant · 2^exp with an integer mant (exact). */
function splitDouble(x: number): { mant: bigint; exp: number } {
  f64Bits[0] = x;
  const bits = u64Bits[0]!;
  const biased = Number((bits >> 52n) & 0x7ffn);
  const frac = bits & ((1n << 52n) - 1n);
  const mant = biased === 0 ? frac : frac | (1n << 52n);
  return { mant: bits >> 63n ? -mant : mant, exp: biased === 0 ? -1074 : biased - 1075 };
}

/**
 * num / den rounded to the nearest double, ties to even (den > 0), with gradual underflow and
 * overflow to ±Infinity: one rounding of the exact quotient.
 */
export function roundRatio(num: bigint, den: bigint): number {
  if (den <= 0n) throw new RangeError('roundRatio: the denominator must be positive');
  if (num === 0n) return 0;
  const neg = num < 0n;
  const a = neg ? -num : num;
  // Scale so the integer quotient q has 55 or 56 bits: enough for 53 bits, a round bit and more.
  const sh = 55 - (bitLength(a) - bitLength(den));
  const n = sh >= 0 ? a << BigInt(sh) : a;
  const d = sh >= 0 ? den : den << BigInt(-sh);
  const q = n / d;
  const sticky = n % d !== 0n;
  // value = (q + rest) · 2^-sh; p = exponent of its leading bit; L = exponent of the last kept bit.
  const p = bitLength(q) - 1 - sh;
  if (p > 1023) return neg ? -Infinity : Infinity;
  const L = Math.max(p - 52, -1074);
  const drop = L + sh; // >= 2: low bits of q below the last kept bit
  let mant = q >> BigInt(drop);
  const rest = q - (mant << BigInt(drop));
  const half = 1n << BigInt(drop - 1);
  if (rest > half || (rest === half && (sticky || (mant & 1n) === 1n))) mant += 1n;
  // mant <= 2^53 and the product is exactly representable (or overflows, correctly, to Infinity).
  const r = Number(mant) * 2 ** L;
  return neg ? -r : r;
}

/** The exact value of an expansion as a fraction. */
export function toFraction(e: ExactSum): Fraction {
  const terms = e.terms();
  if (terms.length === 0) return { num: 0n, den: 1n };
  const parts = terms.map(splitDouble);
  const low = Math.min(...parts.map((x) => x.exp));
  let num = 0n;
  for (const x of parts) num += x.mant << BigInt(x.exp - low);
  return low >= 0 ? { num: num << BigInt(low), den: 1n } : { num, den: 1n << BigInt(-low) };
}

export function addFractions(a: Fraction, b: Fraction): Fraction {
  if (b.num === 0n) return a;
  if (a.num === 0n) return b;
  if (a.den === b.den) return { num: a.num + b.num, den: a.den };
  return { num: a.num * b.den + b.num * a.den, den: a.den * b.den };
}
