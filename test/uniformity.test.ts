/**
 * Uniformity of the shuffle and of the dealing, over many seeds, against published chi-square
 * critical values. Fixed seeds keep CI deterministic.
 *
 * Critical values: upper 0.1 % points of the chi-square distribution (alpha = 0.001), as in the
 * NIST/SEMATECH e-Handbook of Statistical Methods, section 1.3.6.7.4 (values to 3 decimals,
 * recomputed with SciPy's chi2.isf; see ../shared REFERENCES B5).
 */
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildDealTable, dealRecord, seededStarts } from '../src/core/deal.js';
import { deriveSecret, hashWords3 } from '../src/core/hash.js';
import { sortByKey } from '../src/core/sort.js';
import { shuffle } from '../src/index.js';
import { makeTempDir, parseCsv, readPart, removeDir } from './helpers/engine.js';

const CHI2_001: Record<number, number> = { 2: 13.816, 4: 18.467, 5: 20.515, 7: 24.322, 9: 27.877, 23: 49.728 };

function chiSquare(observed: number[], expected: number): number {
  return observed.reduce((a, o) => a + (o - expected) ** 2 / expected, 0);
}

/**
 * The shuffled order of `offsets` (records of input 0 at these byte offsets) for a seed, as the
 * engine computes it: key = keyed hash of (input, offset), order = sort by key.
 */
function shuffledOrder(seed: string, offsets: number[]): number[] {
  const secret = deriveSecret(seed);
  const n = offsets.length;
  const keyHi = new Uint32Array(n);
  const keyLo = new Uint32Array(n);
  offsets.forEach((off, i) => {
    const h = hashWords3(secret, 0, Math.floor(off / 2 ** 32), off >>> 0);
    keyHi[i] = h[0]!;
    keyLo[i] = h[1]!;
  });
  return Array.from(sortByKey({ keyHi, keyLo, identity: (i) => [0, offsets[i]!] }, n, 0));
}

describe('the shuffle is uniform over seeds', () => {
  it("a given record's position among 10 is uniform (chi-square, df 9)", () => {
    const offsets = Array.from({ length: 10 }, (_, i) => 31 + i * 47);
    const seeds = 5000;
    const pos = new Array<number>(10).fill(0);
    for (let s = 0; s < seeds; s++) pos[shuffledOrder(`pos-${s}`, offsets).indexOf(3)]!++;
    expect(chiSquare(pos, seeds / 10)).toBeLessThan(CHI2_001[9]!);
  });

  it('all 3! orders of three records are equally likely (chi-square, df 5)', () => {
    const seeds = 6000;
    const counts = new Map<string, number>();
    for (let s = 0; s < seeds; s++) {
      const k = shuffledOrder(`perm3-${s}`, [10, 20, 30]).join('');
      counts.set(k, (counts.get(k) ?? 0) + 1);
    }
    expect(counts.size).toBe(6);
    expect(chiSquare([...counts.values()], seeds / 6)).toBeLessThan(CHI2_001[5]!);
  });

  it('all 4! orders of four records are equally likely (chi-square, df 23)', () => {
    const seeds = 12000;
    const counts = new Map<string, number>();
    for (let s = 0; s < seeds; s++) {
      const k = shuffledOrder(`perm4-${s}`, [0, 9, 18, 27]).join('');
      counts.set(k, (counts.get(k) ?? 0) + 1);
    }
    expect(counts.size).toBe(24);
    expect(chiSquare([...counts.values()], seeds / 24)).toBeLessThan(CHI2_001[23]!);
  });

  it('the test would catch a biased shuffle (a test of the test)', () => {
    // Sorting by a key that ignores the seed half of the time must fail the same check.
    const seeds = 6000;
    const counts = new Map<string, number>();
    for (let s = 0; s < seeds; s++) {
      const k = s % 2 ? '012' : shuffledOrder(`perm3-${s}`, [10, 20, 30]).join('');
      counts.set(k, (counts.get(k) ?? 0) + 1);
    }
    expect(chiSquare([...counts.values()], seeds / 6)).toBeGreaterThan(CHI2_001[5]!);
  });
});

describe('the dealing is uniform over seeds', () => {
  /** Partition of each record of one stratum of n records into P partitions, as the engine deals. */
  function dealOneStratum(seed: string, n: number, P: number, K = 1): { partition: number[]; fold: number[] } {
    const order = shuffledOrder(seed, Array.from({ length: n }, (_, i) => i * 13));
    const table = buildDealTable([n], { splits: [{ name: '', weight: 1 }], exactCounts: false, partitions: P, folds: K }, seededStarts(deriveSecret(seed), 1));
    const partition = new Array<number>(n);
    const fold = new Array<number>(n);
    order.forEach((rec, rank) => {
      const cell = dealRecord(table, 0, rank);
      partition[rec] = Math.floor(cell / K);
      fold[rec] = cell % K;
    });
    return { partition, fold };
  }

  it("a record's partition is uniform over 5 partitions, also when 23 records do not divide evenly (df 4)", () => {
    const seeds = 5000;
    const hits = new Array<number>(5).fill(0);
    for (let s = 0; s < seeds; s++) hits[dealOneStratum(`part-${s}`, 23, 5).partition[0]!]!++;
    expect(chiSquare(hits, seeds / 5)).toBeLessThan(CHI2_001[4]!);
  });

  it("a record's fold is uniform over 3 folds with 2 partitions (df 2)", () => {
    const seeds = 4000;
    const hits = new Array<number>(3).fill(0);
    for (let s = 0; s < seeds; s++) hits[dealOneStratum(`fold-${s}`, 17, 2, 3).fold[5]!]!++;
    expect(chiSquare(hits, seeds / 3)).toBeLessThan(CHI2_001[2]!);
  });

  it('every seed meets the quotas exactly', () => {
    for (let s = 0; s < 200; s++) {
      const { partition } = dealOneStratum(`quota-${s}`, 23, 5);
      const sizes = new Array<number>(5).fill(0);
      partition.forEach((p) => sizes[p]!++);
      expect(sizes.sort()).toEqual([4, 4, 5, 5, 5]);
    }
  });
});

describe('the engine shuffles as the model above says', () => {
  let dir: string;
  beforeAll(() => (dir = makeTempDir()));
  afterAll(() => removeDir(dir));

  it('orders records by the keyed hash of their byte offset', async () => {
    const lines = ['id,reading'];
    for (let i = 0; i < 40; i++) lines.push(`${i},${(i * 1.5).toFixed(1)}`);
    const text = lines.join('\n') + '\n';
    const file = join(dir, 'small.csv');
    writeFileSync(file, text);
    // Byte offset of every record, from the text itself.
    const offsets: number[] = [];
    let at = lines[0]!.length + 1;
    for (const l of lines.slice(1)) {
      offsets.push(at);
      at += l.length + 1;
    }
    await shuffle({ inputs: [file], out: join(dir, 'o'), seed: 'model-check' });
    const got = parseCsv(readPart(join(dir, 'o', 'part-00000.csv'))).rows.map((r) => Number(r[0]));
    expect(got).toEqual(shuffledOrder('model-check', offsets));
  });
});
