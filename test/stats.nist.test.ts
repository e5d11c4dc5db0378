import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import seedrandom from 'seedrandom';
import { ExactMoments, chanMerge, computeRunningVariance, welfordAdd } from '../src/core/exact-sum.js';
import type { RunningMoments } from '../src/core/exact-sum.js';

// NIST Statistical Reference Datasets (StRD), univariate summary statistics. Data definitions and
// certified values as listed on the NIST StRD pages (https://www.itl.nist.gov/div898/strd/univ/,
// transcribed here; NumAcc1 and NumAcc4 also recomputed with rational arithmetic). NumAcc construction follows
// Simon & Lesage (1989), Computational Statistics & Data Analysis 8, 325-332.
// Tolerances: mean relative 1e-12; sd relative 1e-9, 1e-8 for NumAcc4 (common practice for these
// datasets; the residual error comes from decimal-to-binary parsing of the data).

interface Case {
  name: string;
  values: string[];
  mean: number;
  sd: number;
  sdTol: number;
}

function defineNumAcc(first: string, low: string, high: string): string[] {
  const out = [first];
  for (let i = 0; i < 500; i++) out.push(low, high);
  return out;
}

const mavro = readFileSync(new URL('./fixtures/nist-strd-mavro.dat', import.meta.url), 'latin1')
  .split(/\r?\n/)
  .filter((l) => l.trim() !== '');

const CASES: Case[] = [
  { name: 'NumAcc1', values: ['10000001', '10000003', '10000002'], mean: 10000002, sd: 1, sdTol: 1e-9 },
  { name: 'NumAcc2', values: defineNumAcc('1.2', '1.1', '1.3'), mean: 1.2, sd: 0.1, sdTol: 1e-9 },
  { name: 'NumAcc3', values: defineNumAcc('1000000.2', '1000000.1', '1000000.3'), mean: 1000000.2, sd: 0.1, sdTol: 1e-9 },
  { name: 'NumAcc4', values: defineNumAcc('10000000.2', '10000000.1', '10000000.3'), mean: 10000000.2, sd: 0.1, sdTol: 1e-8 },
  { name: 'Mavro', values: mavro, mean: 2.001856, sd: 0.000429123454003053, sdTol: 1e-9 },
];
const MEAN_TOL = 1e-12;

function isWithinRel(actual: number, expected: number, tol: number): boolean {
  return Math.abs(actual - expected) <= tol * Math.abs(expected); // false for NaN
}

/** Cuts xs into random consecutive chunks of 1..maxLen values. */
function cutChunks(xs: number[], rng: () => number, maxLen: number): number[][] {
  const out: number[][] = [];
  for (let i = 0; i < xs.length; ) {
    const len = 1 + Math.floor(rng() * maxLen);
    out.push(xs.slice(i, i + len));
    i += len;
  }
  return out;
}

function shuffleInPlace<T>(a: T[], rng: () => number): T[] {
  for (let i = a.length - 1; i > 0; i--) {
    const j = Math.floor(rng() * (i + 1));
    [a[i], a[j]] = [a[j]!, a[i]!];
  }
  return a;
}

/** Naive one-pass textbook formula with plain doubles: (Σx² − (Σx)²/n) / (n − 1). */
function computeNaiveSd(xs: number[]): number {
  let s = 0;
  let ss = 0;
  for (const x of xs) {
    s += x;
    ss += x * x;
  }
  return Math.sqrt((ss - (s * s) / xs.length) / (xs.length - 1));
}

describe('NIST StRD univariate: exact moments', () => {
  it.each(CASES)('$name: certified mean and sd, whole-data accumulation', (c) => {
    const xs = c.values.map(Number);
    // Sizes from the NIST StRD definitions: NumAcc1 3, NumAcc2-4 1001, Mavro 50.
    expect(xs.length).toBe(c.name === 'NumAcc1' ? 3 : c.name === 'Mavro' ? 50 : 1001);
    const m = new ExactMoments();
    for (const x of xs) m.add(x);
    expect(m.n).toBe(xs.length);
    expect(isWithinRel(m.mean(), c.mean, MEAN_TOL), `mean ${m.mean()}`).toBe(true);
    expect(isWithinRel(m.sd(), c.sd, c.sdTol), `sd ${m.sd()}`).toBe(true);
  });

  it.each(CASES)('$name: random chunks merged in random orders are bit-identical to the whole', (c) => {
    const xs = c.values.map(Number);
    const whole = new ExactMoments();
    for (const x of xs) whole.add(x);
    const rng = seedrandom(`nist-chunks-${c.name}`);
    for (let trial = 0; trial < 25; trial++) {
      const chunks = cutChunks(xs, rng, 1 + Math.floor(rng() * 40)).map((chunk) => {
        const m = new ExactMoments();
        for (const x of chunk) m.add(x);
        return m;
      });
      shuffleInPlace(chunks, rng);
      // Merge as a random binary tree, not only left to right: pick two, merge, put back.
      const pool = chunks.slice();
      while (pool.length > 1) {
        const a = pool.splice(Math.floor(rng() * pool.length), 1)[0]!;
        const b = pool.splice(Math.floor(rng() * pool.length), 1)[0]!;
        // Also through a JSON round trip, as between worker threads.
        pool.push(ExactMoments.fromJSON(JSON.parse(JSON.stringify(a.merge(b)))));
      }
      const merged = pool[0]!;
      expect(merged.n).toBe(xs.length);
      expect(Object.is(merged.mean(), whole.mean())).toBe(true);
      expect(Object.is(merged.sd(), whole.sd())).toBe(true);
      expect(merged.toJSON()).toEqual(whole.toJSON());
    }
  });
});

describe('NIST StRD univariate: classic Welford and Chan merge', () => {
  it.each(CASES)('$name: Welford over the whole data passes', (c) => {
    const s: RunningMoments = { n: 0, mean: 0, m2: 0 };
    for (const v of c.values) welfordAdd(s, Number(v));
    expect(isWithinRel(s.mean, c.mean, MEAN_TOL)).toBe(true);
    expect(isWithinRel(Math.sqrt(computeRunningVariance(s)), c.sd, c.sdTol)).toBe(true);
  });

  it.each(CASES)('$name: Welford chunks joined by Chan merge pass', (c) => {
    const xs = c.values.map(Number);
    const rng = seedrandom(`nist-chan-${c.name}`);
    const parts = cutChunks(xs, rng, 30).map((chunk) => {
      const s: RunningMoments = { n: 0, mean: 0, m2: 0 };
      for (const x of chunk) welfordAdd(s, x);
      return s;
    });
    shuffleInPlace(parts, rng);
    const merged = parts.reduce(chanMerge, { n: 0, mean: 0, m2: 0 });
    expect(merged.n).toBe(xs.length);
    expect(isWithinRel(merged.mean, c.mean, MEAN_TOL)).toBe(true);
    expect(isWithinRel(Math.sqrt(computeRunningVariance(merged)), c.sd, c.sdTol)).toBe(true);
  });
});

describe('test of the test: the naive one-pass formula is rejected', () => {
  it.each(CASES.filter((c) => c.name === 'NumAcc3' || c.name === 'NumAcc4'))('$name: naive sd falls outside tolerance', (c) => {
    const sd = computeNaiveSd(c.values.map(Number));
    expect(isWithinRel(sd, c.sd, c.sdTol)).toBe(false);
  });
});
