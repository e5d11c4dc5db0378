/**
 * The one balance measure (core/balance.ts) that shuffle checks the tolerance with, verify
 * recomputes and profile predicts: worked examples computed by hand in the comments, and the
 * manifest of a real run recomputed from its parts' counts.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { dealBalance, maxDeviation, signedDeviation, withinTolerance, balanceOfUnits } from '../src/core/balance.js';
import { shuffle, type Manifest } from '../src/index.js';
import { makeSensorCsv, makeTempDir, removeDir } from './helpers/engine.js';

describe('the measure', () => {
  it('signed deviation of a share: (n/unit − N/total) / (N/total)', () => {
    // 3 of 4 records against 6 of 8: 0.75 vs 0.75 -> 0; 2 of 5 against 2 of 8: (0.4 − 0.25) / 0.25 = 0.6.
    expect(signedDeviation(3, 4, 6, 8)).toBe(0);
    expect(signedDeviation(2, 5, 2, 8)).toBeCloseTo(0.6, 15);
    expect(signedDeviation(0, 5, 2, 8)).toBe(-1);
    expect(signedDeviation(1, 0, 2, 8)).toBe(0);
  });

  it('maxDeviation: the largest |deviation| over units and strata, empty units skipped', () => {
    // Units [3, 1], [0, 0], [1, 3] of strata of 4 and 4: unit 2 has 1/4 of stratum 0 against 1/2: 0.5.
    expect(maxDeviation([3, 1, 0, 0, 1, 3], 3, [4, 4])).toEqual({ deviation: 0.5, unit: 0, stratum: 0 });
  });

  // Strata of 6 and 2 records (shares 0.75, 0.25), 2 partitions x 2 folds, one split. Cells
  // (partition, fold): (0,0) [2,1], (0,1) [1,0], (1,0) [2,0], (1,1) [1,1]. Both partitions hold
  // [3,1]: no deviation. Fold 0 holds [4,1]: 0.8 and 0.2, deviations 1/15 and 0.2; fold 1 holds
  // [2,1]: 2/3 and 1/3, deviations 1/9 and 1/3. The worst: fold 1, stratum 1, 1/3.
  const byCell = [2, 1, 1, 0, 2, 0, 1, 1];
  const byStratum = [2, 1, 2, 1, 1, 0, 0, 1];
  const shape = { splits: 1, partitions: 2, folds: 2 };

  it('dealBalance over a deal\'s cells, by cell or by stratum alike', () => {
    for (const w of [dealBalance(byCell, [6, 2], shape), dealBalance(byStratum, [6, 2], shape, 'by-stratum')]) {
      expect(w.kind).toBe('fold');
      expect(w.unit).toBe(1);
      expect(w.stratum).toBe(1);
      expect(w.deviation).toBeCloseTo(1 / 3, 15);
    }
    // Without folds the same cells are two parts of [3,1]: nothing deviates.
    expect(dealBalance([3, 1, 3, 1], [6, 2], { splits: 1, partitions: 2, folds: 1 })).toEqual({ deviation: 0, unit: -1, stratum: -1, kind: 'part' });
  });

  it('folds are compared within each split', () => {
    // Two splits of one partition and 2 folds, strata of 4 and 4. Split 0: fold 0 [2,0], fold 1
    // [0,2]; split 1: fold 0 [0,2], fold 1 [2,0]. Each split's part is [2,2], but split 0's fold
    // 0 holds stratum 0 only: deviation 1 (folds of different splits taken together would be [2,2]).
    const w = dealBalance([2, 0, 0, 2, 0, 2, 2, 0], [4, 4], { splits: 2, partitions: 1, folds: 2 });
    expect(w).toEqual({ deviation: 1, unit: 0, stratum: 0, kind: 'fold' });
  });

  it('parts win a tie with folds', () => {
    expect(balanceOfUnits([1, 0, 0, 1], 2, [1, 0, 0, 1], 2, [1, 1]).kind).toBe('part');
  });

  it('the tolerance allows for rounding, no more', () => {
    expect(withinTolerance(0.5, 0.5)).toBe(true);
    expect(withinTolerance(0.5 + 1e-13, 0.5)).toBe(true);
    expect(withinTolerance(0.5 + 1e-9, 0.5)).toBe(false);
  });
});

describe('a run\'s manifest', () => {
  let dir: string;
  beforeAll(() => {
    dir = makeTempDir('rowdeck-balance-');
    writeFileSync(join(dir, 'in.csv'), makeSensorCsv({ rows: 3000, seed: 7 }));
  });
  afterAll(() => removeDir(dir));

  it('records the balance the parts\' own counts give (parts and each split\'s folds)', async () => {
    const out = join(dir, 'out');
    await shuffle({ inputs: [join(dir, 'in.csv')], out, stratify: 'fault', split: 'a=0.7,b=0.3', partitions: 3, folds: 4, seed: 'balance' });
    const m = JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as Manifest;
    const S = m.strata.values.length;
    const sizes = m.strata.values.map((v) => v.records);
    const parts = m.output.parts.flatMap((p) => p.strata);
    const splits = [...new Set(m.output.parts.map((p) => p.split))];
    const folds = new Float64Array(splits.length * 4 * S);
    m.output.parts.forEach((p) => p.foldStrata!.forEach((row, f) => row.forEach((n, s) => (folds[(splits.indexOf(p.split) * 4 + f) * S + s]! += n))));
    const w = balanceOfUnits(parts, m.output.parts.length, folds, splits.length * 4, sizes);
    expect(m.balance.maxDeviation).toBeGreaterThan(0);
    expect(w.deviation).toBe(m.balance.maxDeviation);
  });
});
