import { describe, expect, it } from 'vitest';
import seedrandom from 'seedrandom';
import { computeMeanVariance, DecimalSums } from '../src/core/decimal-sums.js';
import { ExactMoments, ExactSum, roundRatio, toFraction } from '../src/core/exact-sum.js';

// Reference arithmetic: every double is an integer multiple of 2^-1074, so scaling by 2^K with a
// large K turns sums and products into exact BigInt arithmetic. BigInt -> Number conversion is
// specified to round to nearest, ties to even (ECMA-262, "Number(value)" on a BigInt), which gives
// an independent correctly rounded reference.
const K = 1200n; // scale for sums; products use 2K

const f64 = new Float64Array(1);
const u64 = new BigUint64Array(f64.buffer);

/** x · 2^k as an exact BigInt (x must be finite and x · 2^k an integer). */
function toScaledBig(x: number, k: bigint): bigint {
  f64[0] = x;
  const bits = u64[0]!;
  const sign = bits >> 63n ? -1n : 1n;
  const exp = Number((bits >> 52n) & 0x7ffn);
  const frac = bits & ((1n << 52n) - 1n);
  const mant = exp === 0 ? frac : frac | (1n << 52n);
  const e = BigInt(exp === 0 ? -1074 : exp - 1075) + k;
  if (e < 0n) throw new Error('scale too small');
  return sign * (mant << e);
}

/** Correctly rounded double of v / 2^k (result assumed normal). */
function roundScaledBig(v: bigint, k: bigint): number {
  if (v === 0n) return 0;
  const neg = v < 0n;
  let a = neg ? -v : v;
  let shift = BigInt(a.toString(2).length) - 64n;
  if (shift > 0n) {
    const sticky = (a & ((1n << shift) - 1n)) !== 0n ? 1n : 0n;
    a = (a >> shift) | sticky; // 64 bits + sticky decide round-to-nearest-even correctly
  } else shift = 0n;
  let r = Number(a); // rounds to 53 bits, ties to even
  let e = Number(shift - k);
  while (e > 0) { const s = Math.min(e, 1000); r *= 2 ** s; e -= s; }
  while (e < 0) { const s = Math.min(-e, 1000); r *= 2 ** -s; e += s; }
  return neg ? -r : r;
}

function sumOf(e: ExactSum, k: bigint): bigint {
  return e.terms().reduce((acc, t) => acc + toScaledBig(t, k), 0n);
}

/** Random doubles over a wide range of exponents, plus powers of two that create ties. */
function makeValues(rng: () => number, count: number): number[] {
  const out: number[] = [];
  for (let i = 0; i < count; i++) {
    const kind = rng();
    const sign = rng() < 0.5 ? -1 : 1;
    if (kind < 0.4) out.push(sign * rng() * 2 ** Math.floor(rng() * 200 - 100));
    else if (kind < 0.7) out.push(sign * 2 ** Math.floor(rng() * 120 - 60));
    else out.push(sign * (1 + Math.floor(rng() * 2 ** 20)) * 2 ** Math.floor(rng() * 40 - 20));
  }
  return out;
}

describe('ExactSum against exact BigInt arithmetic', () => {
  it('add(): approx() is the correctly rounded sum, for 300 random lists', () => {
    const rng = seedrandom('exact-sum-add');
    for (let trial = 0; trial < 300; trial++) {
      const xs = makeValues(rng, 1 + Math.floor(rng() * 60));
      const s = new ExactSum(4);
      let ref = 0n;
      for (const x of xs) {
        s.add(x);
        ref += toScaledBig(x, K);
      }
      expect(sumOf(s, K)).toBe(ref);
      expect(Object.is(s.approx(), roundScaledBig(ref, K))).toBe(true);
    }
  });

  it('approx() breaks exact ties to even and nudges near-ties the right way', () => {
    const u = 2 ** -53; // half an ulp of 1
    // 1 + 2^-53 is a tie between 1 and 1 + 2^-52: even wins (1).
    expect(new ExactSum().add(1).add(u).approx()).toBe(1);
    // A tiny extra push above the tie rounds up; below it rounds down.
    expect(new ExactSum().add(1).add(u).add(2 ** -200).approx()).toBe(1 + 2 ** -52);
    expect(new ExactSum().add(1).add(u).add(-(2 ** -200)).approx()).toBe(1);
    // (1 + 2^-52) + 2^-53 is a tie whose even neighbour is above.
    expect(new ExactSum().add(1 + 2 ** -52).add(u).approx()).toBe(1 + 2 ** -51);
    // Plain double addition would give 1 + 2^-52 here, rounding twice.
    const naive = 1 + u + 2 ** -200;
    expect(naive).toBe(1);
  });

  it('addProduct(), addSquare(), scale(), multiply(), subtract() are exact', () => {
    const rng = seedrandom('exact-sum-products');
    for (let trial = 0; trial < 200; trial++) {
      const xs = makeValues(rng, 1 + Math.floor(rng() * 20));
      const ys = makeValues(rng, xs.length);
      const prod = new ExactSum();
      const sq = new ExactSum();
      let refProd = 0n;
      let refSq = 0n;
      for (let i = 0; i < xs.length; i++) {
        const x = xs[i]!;
        const y = ys[i]!;
        prod.addProduct(x, y);
        sq.addSquare(x);
        refProd += toScaledBig(x, K) * toScaledBig(y, K);
        refSq += toScaledBig(x, K) ** 2n;
      }
      expect(sumOf(prod, 2n * K)).toBe(refProd);
      expect(sumOf(sq, 2n * K)).toBe(refSq);
      expect(Object.is(prod.approx(), roundScaledBig(refProd, 2n * K))).toBe(true);

      const a = ExactSum.fromTerms(xs);
      const b = ExactSum.fromTerms(ys);
      const refA = xs.reduce((acc, x) => acc + toScaledBig(x, K), 0n);
      const refB = ys.reduce((acc, y) => acc + toScaledBig(y, K), 0n);
      const n = 1 + Math.floor(rng() * 2 ** 40);
      expect(sumOf(a.clone().scale(n), K)).toBe(refA * BigInt(n));
      expect(sumOf(a.multiply(b), 2n * K)).toBe(refA * refB);
      expect(sumOf(a.clone().subtract(b), K)).toBe(refA - refB);
      expect(sumOf(a.clone().negate(), K)).toBe(-refA);
      // approx() stays correctly rounded on the results of these operations too.
      expect(Object.is(a.multiply(b).approx(), roundScaledBig(refA * refB, 2n * K))).toBe(true);
      expect(Object.is(a.clone().scale(n).subtract(b).approx(), roundScaledBig(refA * BigInt(n) - refB, K))).toBe(true);
    }
  });

  it('merge() in any order gives the same canonical terms and the same approx() bits', () => {
    const rng = seedrandom('exact-sum-merge');
    const xs = makeValues(rng, 500);
    const whole = new ExactSum();
    for (const x of xs) whole.add(x);
    for (let trial = 0; trial < 20; trial++) {
      const parts: ExactSum[] = [];
      let i = 0;
      while (i < xs.length) {
        const len = 1 + Math.floor(rng() * 60);
        const p = new ExactSum();
        for (const x of xs.slice(i, i + len)) p.add(x);
        parts.push(p);
        i += len;
      }
      parts.sort(() => rng() - 0.5);
      const merged = new ExactSum();
      for (const p of parts) merged.merge(p);
      expect(merged.terms()).toEqual(whole.terms());
      expect(Object.is(merged.approx(), whole.approx())).toBe(true);
      expect(ExactSum.fromJSON(JSON.parse(JSON.stringify(merged)) as number[]).terms()).toEqual(whole.terms());
    }
  });

  it('an overflowed value still serialises (terms() stops at a non-finite term)', () => {
    const s = new ExactSum().add(1e308).add(1e308);
    const t = s.terms();
    expect(t.length).toBe(1);
    expect(Number.isFinite(t[0])).toBe(false);
  });

  it('cancellation to exactly zero leaves an empty expansion', () => {
    const s = new ExactSum().add(1e300).add(1).add(-1e300).add(-1);
    expect(s.isZero()).toBe(true);
    expect(s.approx()).toBe(0);
    expect(s.terms()).toEqual([]);
  });
});

describe('ExactMoments', () => {
  it('variance equals the exact rational variance, rounded, for small integer data', () => {
    // Integers: Σx and Σx² are exact in BigInt; variance numerator n·Σx² − (Σx)² checked exactly.
    const xs = [3, 1, 4, 1, 5, 9, 2, 6, 5, 3, 5];
    const m = new ExactMoments();
    for (const x of xs) m.add(x);
    const n = BigInt(xs.length);
    const s1 = xs.reduce((a, x) => a + BigInt(x), 0n);
    const s2 = xs.reduce((a, x) => a + BigInt(x) ** 2n, 0n);
    const num = n * s2 - s1 * s1;
    expect(m.variance()).toBe(Number(num) / Number(n * (n - 1n)));
    expect(m.mean()).toBe(Number(s1) / xs.length);
  });

  it('Σx and Σx² are exact over the whole double range (fast binned path and its fallback)', () => {
    const rng = seedrandom('exact-moments-range');
    // Subnormals, tiny, ordinary, and beyond the 2^450 fast-path limit; both signs.
    // (Squares must stay finite: |x| < 2^511.)
    const xs: number[] = [5e-324, -3e-320, 2 ** -1022, 1e-300, 2 ** 449.5, -(2 ** 451), 1e150, -1e-200];
    for (let i = 0; i < 3000; i++) {
      const sign = rng() < 0.5 ? -1 : 1;
      xs.push(sign * rng() * 2 ** Math.floor(rng() * 1000 - 500));
    }
    const m = new ExactMoments();
    for (const x of xs) m.add(x);
    const e1 = new ExactSum();
    const e2 = new ExactSum();
    for (const x of xs) {
      e1.add(x);
      e2.addSquare(x);
    }
    const ref1 = xs.reduce((a, x) => a + toScaledBig(x, K), 0n);
    expect(sumOf(m.s1, K)).toBe(ref1);
    // Squares of the smallest values are not exact (the low product underflows); compare with the
    // same two-product terms added through the plain expansion instead.
    expect(m.s2.terms()).toEqual(e2.terms());
    expect(m.s1.terms()).toEqual(e1.terms());
  });

  it('stays exact past the point where the bins must be emptied (2^20 adds)', () => {
    // 1.5M values of 0.1: Σx is 1.5M times the double nearest 0.1, exactly.
    const m = new ExactMoments();
    const count = 1_500_000;
    for (let i = 0; i < count; i++) m.add(0.1);
    expect(sumOf(m.s1, K)).toBe(toScaledBig(0.1, K) * BigInt(count));
    expect(sumOf(m.s2, 2n * K)).toBe(toScaledBig(0.1, K) ** 2n * BigInt(count));
    expect(m.variance()).toBe(0);
  });

  it('variance numerator n·Σx² − (Σx)² is rounded once from its exact value (random decimals)', () => {
    const rng = seedrandom('exact-variance');
    for (let trial = 0; trial < 50; trial++) {
      const xs = Array.from({ length: 2 + Math.floor(rng() * 200) }, () => Number((rng() * 2e4 - 1e4).toFixed(3)) + 1e6);
      const m = new ExactMoments();
      for (const x of xs) m.add(x);
      const n = BigInt(xs.length);
      const s1 = xs.reduce((a, x) => a + toScaledBig(x, K), 0n);
      const s2 = xs.reduce((a, x) => a + toScaledBig(x, K) ** 2n, 0n);
      const num = roundScaledBig(n * s2 - s1 * s1, 2n * K);
      expect(Object.is(m.variance(), num / (xs.length * (xs.length - 1)))).toBe(true);
      expect(Object.is(m.mean(), roundScaledBig(s1, K) / xs.length)).toBe(true);
    }
  });

  it('fewer than two values give NaN variance; empty gives NaN mean', () => {
    expect(Number.isNaN(new ExactMoments().mean())).toBe(true);
    expect(Number.isNaN(new ExactMoments().add(4).variance())).toBe(true);
    expect(new ExactMoments().add(4).mean()).toBe(4);
  });
});

describe('roundRatio: one correctly rounded division of exact integers', () => {
  // Reference: ECMA-262 StringToNumber rounds a decimal literal to the nearest double, ties to
  // even (IEEE 754 round-to-nearest), with gradual underflow; so roundRatio(m, 10^k) must equal
  // Number(`${m}e-${k}`) and roundRatio(m·10^k, 1) must equal Number(`${m}e${k}`).
  it('agrees with the parse of the same decimal, over the whole range including subnormals', () => {
    const rng = seedrandom('round-ratio');
    for (let i = 0; i < 4000; i++) {
      const digits = 1 + Math.floor(rng() * 30);
      let m = String(1 + Math.floor(rng() * 9));
      for (let d = 1; d < digits; d++) m += Math.floor(rng() * 10);
      const k = Math.floor(rng() * 360);
      const neg = rng() < 0.3;
      const num = (neg ? -1n : 1n) * BigInt(m);
      expect(Object.is(roundRatio(num, 10n ** BigInt(k)), Number(`${neg ? '-' : ''}${m}e-${k}`)), `${m}e-${k}`).toBe(true);
      const up = Math.floor(rng() * 320);
      expect(Object.is(roundRatio(num * 10n ** BigInt(up), 1n), Number(`${neg ? '-' : ''}${m}e${up}`)), `${m}e${up}`).toBe(true);
    }
  });

  it('breaks ties to even, at the top and at the bottom of the range', () => {
    expect(roundRatio(2n ** 53n + 1n, 1n)).toBe(2 ** 53); // halfway, even neighbour below
    expect(roundRatio(2n ** 53n + 3n, 1n)).toBe(2 ** 53 + 4); // halfway, even neighbour above
    expect(roundRatio(1n, 2n ** 1075n)).toBe(0); // half the smallest subnormal: ties to 0 (even)
    expect(roundRatio(3n, 2n ** 1076n)).toBe(5e-324); // three quarters of it: up
    expect(roundRatio(-1n, 3n)).toBe(-1 / 3); // IEEE division of exact operands is correctly rounded
    expect(roundRatio(2n ** 1024n, 1n)).toBe(Infinity);
    expect(roundRatio(2n ** 1024n - 2n ** 970n, 1n)).toBe(Infinity); // rounds up past the largest double
    expect(roundRatio(2n ** 1024n - 2n ** 971n, 1n)).toBe(Number.MAX_VALUE);
  });

  it('matches IEEE division wherever both operands are exact doubles', () => {
    const rng = seedrandom('round-ratio-div');
    for (let i = 0; i < 2000; i++) {
      const a = Math.floor((rng() - 0.5) * 2 ** 53);
      const b = 1 + Math.floor(rng() * 2 ** 53);
      expect(Object.is(roundRatio(BigInt(a), BigInt(b)), a / b + 0)).toBe(true);
    }
  });

  it('toFraction gives the exact value of an expansion', () => {
    const e = new ExactSum().add(0.1).add(1e-300).add(-3).add(2 ** 700);
    const f = toFraction(e);
    // Cross-multiplied against the BigInt reference: value = sumOf(e, K) / 2^K.
    expect(f.num * 2n ** K).toBe(sumOf(e, K) * f.den);
  });
});

/** Exact reference for decimals: Σ m·10^(K−k) over a common scale K = 40. */
function decimalRef(values: [bigint, number][]): { s1: bigint; s2: bigint } {
  let s1 = 0n;
  let s2 = 0n;
  for (const [m, k] of values) {
    const scaled = m * 10n ** BigInt(40 - k);
    s1 += scaled;
    s2 += scaled * scaled;
  }
  return { s1, s2 }; // Σx = s1 / 10^40, Σx² = s2 / 10^80
}

describe('DecimalSums: exact sums of short decimals', () => {
  it('Σx and Σx² equal the exact decimal sums, with the largest mantissas and every scale', () => {
    const rng = seedrandom('decimal-sums');
    const values: [bigint, number][] = [];
    const d = new DecimalSums();
    for (let i = 0; i < 20000; i++) {
      const big = rng() < 0.2;
      const m = Math.floor((rng() * 2 - 1) * (big ? 2 ** 50 - 1 : 2 ** 26));
      const k = Math.floor(rng() * 23);
      d.add(m, k);
      values.push([BigInt(m), k]);
    }
    d.addRepeated(-(2 ** 50) + 1, 22, 7);
    for (let j = 0; j < 7; j++) values.push([BigInt(-(2 ** 50) + 1), 22]);
    const { s1, s2 } = d.fractions();
    const ref = decimalRef(values);
    expect(s1.num * 10n ** 40n).toBe(ref.s1 * s1.den);
    expect(s2.num * 10n ** 80n).toBe(ref.s2 * s2.den);
    expect(d.n).toBe(values.length);
  });

  it('stays exact past the point where the double accumulators are emptied (2^25 adds)', () => {
    const d = new DecimalSums();
    const m = 2 ** 50 - 1;
    const count = 2 ** 25 + 5;
    for (let i = 0; i < count; i++) d.add(m, 3);
    const { s1, s2 } = d.fractions();
    expect(s1).toEqual({ num: BigInt(m) * BigInt(count), den: 1000n });
    expect(s2).toEqual({ num: BigInt(m) ** 2n * BigInt(count), den: 1000000n });
  });

  it('merged in any order, through JSON, gives the same serialised sums', () => {
    const rng = seedrandom('decimal-merge');
    const parts = Array.from({ length: 9 }, () => new DecimalSums());
    const whole = new DecimalSums();
    for (let i = 0; i < 5000; i++) {
      const m = Math.floor((rng() * 2 - 1) * 2 ** (rng() * 50));
      const k = Math.floor(rng() * 23);
      whole.add(m, k);
      parts[Math.floor(rng() * parts.length)]!.add(m, k);
    }
    for (let trial = 0; trial < 5; trial++) {
      const pool = parts.map((p) => DecimalSums.fromJSON(JSON.parse(JSON.stringify(p.toJSON()))));
      while (pool.length > 1) {
        const a = pool.splice(Math.floor(rng() * pool.length), 1)[0]!;
        const b = pool.splice(Math.floor(rng() * pool.length), 1)[0]!;
        pool.push(DecimalSums.fromJSON(JSON.parse(JSON.stringify(a.merge(b).toJSON()))));
      }
      expect(pool[0]!.toJSON()).toEqual(whole.toJSON());
    }
  });
});

describe('computeMeanVariance: decimals and doubles together, each figure rounded once', () => {
  it('equals the exact rational mean and variance, rounded', () => {
    const rng = seedrandom('mean-variance');
    for (let trial = 0; trial < 40; trial++) {
      const dec = new DecimalSums();
      const bin = new ExactMoments();
      const decs: [bigint, number][] = [];
      const dbls: number[] = [];
      const n = 2 + Math.floor(rng() * 300);
      for (let i = 0; i < n; i++) {
        if (rng() < 0.7) {
          const m = Math.floor((rng() * 2 - 1) * 1e9);
          const k = Math.floor(rng() * 6);
          dec.add(m, k);
          decs.push([BigInt(m), k]);
        } else {
          const x = (rng() - 0.5) * 2 ** Math.floor(rng() * 60 - 20);
          bin.add(x);
          dbls.push(x);
        }
      }
      // Reference over the common denominator 10^40 · 2^K.
      const d = decimalRef(decs);
      const S1 = d.s1 * 2n ** K + dbls.reduce((a, x) => a + toScaledBig(x, K), 0n) * 10n ** 40n;
      const S2 = d.s2 * 2n ** (2n * K) + dbls.reduce((a, x) => a + toScaledBig(x, K) ** 2n, 0n) * 10n ** 80n;
      const D1 = 10n ** 40n * 2n ** K;
      const N = BigInt(n);
      const r = computeMeanVariance(dec, bin);
      expect(r.n).toBe(n);
      expect(Object.is(r.mean, roundRatio(S1, D1 * N))).toBe(true);
      expect(Object.is(r.variance, roundRatio(N * S2 - S1 * S1, D1 * D1 * N * (N - 1n)))).toBe(true);
    }
  });

  it('the mean of 0.1, 0.2 and 0.4 is 0.7/3 rounded once, not the rounded doubles summed', () => {
    const dec = new DecimalSums();
    dec.add(1, 1);
    dec.add(2, 1);
    dec.add(4, 1);
    const r = computeMeanVariance(dec, new ExactMoments());
    expect(r.mean).toBe(Number('0.23333333333333333333333')); // 7/30, parsed (ECMA-262: correctly rounded)
    expect(r.variance).toBe(roundRatio(7n, 300n)); // exact variance 0.0233…, i.e. 7/300
  });

  it('is NaN without values and without a second value', () => {
    expect(Number.isNaN(computeMeanVariance(new DecimalSums(), new ExactMoments()).mean)).toBe(true);
    const one = new DecimalSums();
    one.add(5, 0);
    const r = computeMeanVariance(one, new ExactMoments());
    expect(r.mean).toBe(5);
    expect(Number.isNaN(r.variance)).toBe(true);
  });
});
