/**
 * The order inside every part: a uniformly random order for `--order random` (the default), in
 * every mode, tested on joint properties of the sequence (runs, adjacent pairs), not only on
 * each record's part; and the guarantees of `--order spread` and `--order grouped`.
 *
 * Inputs are sorted by class, as field logs often are: the case where an order that follows the
 * input, or the dealing, shows at once. Every statistical check uses fixed seeds (deterministic
 * CI) and alpha = 0.001 per check; each describe block states its family-wise alpha (Bonferroni:
 * checks × 0.001). Outputs are read back with csv-parse, not with the engine's reader.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildDealTable, dealRecord, seededStarts } from '../src/core/deal.js';
import { deriveSecret, hashWords3 } from '../src/core/hash.js';
import { SpreadCheck, SpreadOrder } from '../src/core/spread.js';
import { shuffle, verify, type Manifest } from '../src/index.js';
import { createRandom, makeTempDir, parseCsv, readPart, removeDir } from './helpers/engine.js';
import { CHI2_001, runsTest, serialTest, Z_001 } from './helpers/order-stats.js';

let dir: string;
beforeAll(() => (dir = makeTempDir()));
afterAll(() => removeDir(dir));

/**
 * Invented readings of a fleet of field sensors, sorted by class: id, user (the crew member who
 * logged it, for --group), label (class), value (a measurement, for quantile bins).
 */
function writeSorted(name: string, rows: number, classes: [string, number][], crew = 400, seed = 7): string {
  const rnd = createRandom(seed);
  const lines = ['id,user,label,value'];
  let id = 0;
  for (const [label, share] of classes) {
    for (let k = 0; k < Math.round(rows * share); k++) {
      lines.push(`${id++},crew${Math.floor(rnd() * crew)},${label},${(rnd() * 100).toFixed(3)}`);
    }
  }
  const path = join(dir, name);
  writeFileSync(path, lines.join('\n') + '\n');
  return path;
}

interface PartRows {
  path: string;
  rows: string[][];
}

function readParts(out: string, m: Manifest): PartRows[] {
  return m.output.parts.map((p) => ({ path: p.path, rows: parseCsv(readPart(join(out, p.path))).rows }));
}

/** Index of each distinct value of a column, by first appearance. */
function categories(values: string[]): { ids: number[]; k: number } {
  const seen = new Map<string, number>();
  const ids = values.map((v) => seen.get(v) ?? (seen.set(v, seen.size), seen.size - 1));
  return { ids, k: seen.size };
}

describe('exact dealing: classes and folds inside a part are in random order', () => {
  // Family-wise alpha: 3 seeds × 8 parts × 2 checks (runs, pairs) = 48 checks at 0.001 ≤ 0.048.
  it.each(['order-a', 'order-b', 'order-c'])('two classes 50/50, 8 stratified partitions, seed %s (runs test and serial test per part)', async (seed) => {
    const input = writeSorted(`two-${seed}.csv`, 40000, [['calm', 0.5], ['gust', 0.5]]);
    const out = join(dir, `two-${seed}`);
    // One of the seeds on many small buckets (a small budget), so the dealing crosses buckets.
    const m = await shuffle({ inputs: [input], out, seed, partitions: 8, stratify: 'label', ...(seed === 'order-b' ? { memory: '2MiB' } : {}) });
    if (seed === 'order-b') expect(m.run.buckets).toBeGreaterThan(1);
    for (const part of readParts(out, m)) {
      const labels = part.rows.map((r) => r[2]!);
      expect(labels.length).toBe(5000);
      const runs = runsTest(labels.map((l) => l === 'calm'));
      expect(Math.abs(runs.z), `${part.path}: runs z = ${runs.z.toFixed(2)}`).toBeLessThan(Z_001);
      const { ids } = categories(labels);
      const serial = serialTest(ids, 2);
      expect(serial.chi2, `${part.path}: serial chi-square ${serial.chi2.toFixed(1)}`).toBeLessThan(CHI2_001[3]!);
    }
  });

  // Family-wise alpha: 4 parts × 4 checks = 16 checks at 0.001 ≤ 0.016.
  it('four classes, 4 partitions × 4 folds: class pairs, class runs, fold pairs and fold runs per part', async () => {
    const input = writeSorted('four.csv', 40000, [['calm', 0.4], ['gust', 0.3], ['squall', 0.2], ['storm', 0.1]]);
    const out = join(dir, 'four');
    const m = await shuffle({ inputs: [input], out, seed: 'four-classes', partitions: 4, folds: 4, stratify: 'label', threads: 2 });
    for (const part of readParts(out, m)) {
      const labels = categories(part.rows.map((r) => r[2]!));
      expect(labels.k).toBe(4);
      const classPairs = serialTest(labels.ids, 4);
      expect(classPairs.chi2, `${part.path}: class pairs chi-square ${classPairs.chi2.toFixed(1)}`).toBeLessThan(CHI2_001[15]!);
      const classRuns = runsTest(part.rows.map((r) => r[2] === 'calm'));
      expect(Math.abs(classRuns.z), `${part.path}: class runs z = ${classRuns.z.toFixed(2)}`).toBeLessThan(Z_001);
      const folds = part.rows.map((r) => Number(r[4]));
      const foldPairs = serialTest(folds, 4);
      expect(foldPairs.chi2, `${part.path}: fold pairs chi-square ${foldPairs.chi2.toFixed(1)}`).toBeLessThan(CHI2_001[15]!);
      const foldRuns = runsTest(folds.map((f) => f < 2));
      expect(Math.abs(foldRuns.z), `${part.path}: fold runs z = ${foldRuns.z.toFixed(2)}`).toBeLessThan(Z_001);
    }
  });

  // Family-wise alpha: 3 splits × 2 checks = 6 checks at 0.001 ≤ 0.006.
  it('named splits: each split is in random order', async () => {
    const input = writeSorted('splits.csv', 30000, [['calm', 0.5], ['gust', 0.5]]);
    const out = join(dir, 'splits');
    const m = await shuffle({ inputs: [input], out, seed: 'splits', split: 'train=0.6,valid=0.2,test=0.2', stratify: 'label' });
    for (const part of readParts(out, m)) {
      const labels = part.rows.map((r) => r[2]!);
      const runs = runsTest(labels.map((l) => l === 'calm'));
      expect(Math.abs(runs.z), `${part.path}: runs z = ${runs.z.toFixed(2)}`).toBeLessThan(Z_001);
      const serial = serialTest(categories(labels).ids, 2);
      expect(serial.chi2, `${part.path}: serial chi-square ${serial.chi2.toFixed(1)}`).toBeLessThan(CHI2_001[3]!);
    }
  });

  // Family-wise alpha: 4 parts × 1 check = 4 checks at 0.001 ≤ 0.004.
  it('quantile bins over two inputs: the bins are in random order inside each part', async () => {
    const a = writeSorted('bins-a.csv', 12000, [['calm', 1]], 400, 11);
    const b = writeSorted('bins-b.csv', 12000, [['calm', 1]], 400, 12);
    // Sort each input by value: the worst case for bins.
    for (const f of [a, b]) {
      const { header, rows } = parseCsv(readPart(f));
      rows.sort((x, y) => Number(x[3]) - Number(y[3]));
      writeFileSync(f, [header.join(','), ...rows.map((r) => r.join(','))].join('\n') + '\n');
    }
    const out = join(dir, 'bins');
    const m = await shuffle({ inputs: [a, b], out, seed: 'bins', partitions: 4, stratify: 'value:bins=4' });
    const median = m.strata.bins[0]!.edges[1]!;
    for (const part of readParts(out, m)) {
      const runs = runsTest(part.rows.map((r) => Number(r[3]) < median));
      expect(Math.abs(runs.z), `${part.path}: runs z = ${runs.z.toFixed(2)}`).toBeLessThan(Z_001);
    }
  });
});

/** Runs test on whether a record's group is one of the even-numbered ones, and the count of adjacent records of one group. */
function groupChecks(part: PartRows, col: number): { z: number; sameAdjacent: number; expectedSame: number } {
  const groups = part.rows.map((r) => r[col]!);
  const runs = runsTest(groups.map((g) => Number(g.replace(/\D/g, '')) % 2 === 0));
  let same = 0;
  for (let i = 1; i < groups.length; i++) if (groups[i] === groups[i - 1]) same++;
  // Under a random order, E[adjacent pairs of one group] = Σ m_g(m_g − 1) / n (exact for a random permutation of the part).
  const sizes = new Map<string, number>();
  for (const g of groups) sizes.set(g, (sizes.get(g) ?? 0) + 1);
  let expectedSame = 0;
  for (const m of sizes.values()) expectedSame += (m * (m - 1)) / groups.length;
  return { z: runs.z, sameAdjacent: same, expectedSame };
}

describe('groups and keys decide the part, not the place in it', () => {
  // Family-wise alpha: 2 seeds × 4 parts × 2 checks = 16 checks at 0.001 ≤ 0.016.
  it.each(['crew-a', 'crew-b'])('--group: records of one crew member are spread through their part (seed %s)', async (seed) => {
    const input = writeSorted(`group-${seed}.csv`, 24000, [['calm', 0.5], ['gust', 0.5]]);
    const out = join(dir, `group-${seed}`);
    const m = await shuffle({ inputs: [input], out, seed, partitions: 4, group: 'user', stratify: 'label', ...(seed === 'crew-b' ? { memory: '2MiB', threads: 2 } : {}) });
    const partOf = new Map<string, string>();
    for (const part of readParts(out, m)) {
      for (const r of part.rows) {
        expect(partOf.get(r[1]!) ?? part.path).toBe(part.path);
        partOf.set(r[1]!, part.path);
      }
      const g = groupChecks(part, 1);
      expect(Math.abs(g.z), `${part.path}: group runs z = ${g.z.toFixed(2)}`).toBeLessThan(Z_001);
      // A grouped order has nearly every neighbour in the same group; a random one about Σm(m−1)/n.
      expect(g.sameAdjacent).toBeLessThan(3 * g.expectedSame + 10);
      const classRuns = runsTest(part.rows.map((r) => r[2] === 'calm'));
      expect(Math.abs(classRuns.z), `${part.path}: class runs z = ${classRuns.z.toFixed(2)}`).toBeLessThan(Z_001);
    }
  });

  // Family-wise alpha: 4 parts × 1 check = 4 checks at 0.001 ≤ 0.004.
  it('--assign hash --key: records of one key share a part and are spread through it', async () => {
    const input = writeSorted('hash.csv', 24000, [['calm', 0.5], ['gust', 0.5]]);
    const out = join(dir, 'hash');
    const m = await shuffle({ inputs: [input], out, seed: 'hash-order', partitions: 4, assign: 'hash', key: 'user' });
    const partOf = new Map<string, string>();
    for (const part of readParts(out, m)) {
      for (const r of part.rows) {
        expect(partOf.get(r[1]!) ?? part.path).toBe(part.path);
        partOf.set(r[1]!, part.path);
      }
      const g = groupChecks(part, 1);
      expect(Math.abs(g.z), `${part.path}: key runs z = ${g.z.toFixed(2)}`).toBeLessThan(Z_001);
      expect(g.sameAdjacent).toBeLessThan(3 * g.expectedSame + 10);
    }
  });

  it('--order grouped keeps each group together, in input order, and fails the test above (a test of the test)', async () => {
    const input = writeSorted('grouped.csv', 12000, [['calm', 0.5], ['gust', 0.5]]);
    const out = join(dir, 'grouped');
    const m = await shuffle({ inputs: [input], out, seed: 'grouped', partitions: 4, group: 'user', order: 'grouped' });
    expect(m.options.order).toBe('grouped');
    for (const part of readParts(out, m)) {
      const finished = new Set<string>();
      let lastId = -1;
      for (let i = 0; i < part.rows.length; i++) {
        const g = part.rows[i]![1]!;
        const id = Number(part.rows[i]![0]);
        if (i > 0 && g !== part.rows[i - 1]![1]) {
          finished.add(part.rows[i - 1]![1]!);
          lastId = -1;
        }
        expect(finished.has(g), `${part.path}: ${g} appears in two places`).toBe(false);
        expect(id).toBeGreaterThan(lastId);
        lastId = id;
      }
      const c = groupChecks(part, 1);
      expect(Math.abs(c.z)).toBeGreaterThan(Z_001);
    }
  });

  it('--order grouped needs --group or --assign hash', async () => {
    const input = writeSorted('grouped-bad.csv', 100, [['calm', 1]]);
    await expect(shuffle({ inputs: [input], out: join(dir, 'gb'), order: 'grouped' })).rejects.toMatchObject({ code: 'RDK_OPTION' });
  });
});

describe('the dealing model: the rank permutation is what makes the order random', () => {
  /**
   * One stratified part's class sequence, as the engine builds it: records of two strata get
   * keys (keyed hash of their offset), each stratum's records are dealt by rank in key order,
   * and the part lists its records in key order. `permuted`: with the rank permutation (this
   * code) or without it (rank r at position r, the scheme before it).
   */
  function partSequence(seed: string, permuted: boolean): boolean[] {
    const secret = deriveSecret(seed);
    const n = 16000;
    const P = 4;
    const keys = Array.from({ length: n }, (_, i) => {
      const h = hashWords3(secret, 0, 0, i * 40);
      return { i, stratum: i < n / 2 ? 0 : 1, hi: h[0]!, lo: h[1]! };
    });
    keys.sort((a, b) => a.hi - b.hi || a.lo - b.lo);
    const spec = { splits: [{ name: '', weight: 1 }], exactCounts: false, partitions: P, folds: 1 };
    const table = buildDealTable([n / 2, n / 2], spec, seededStarts(secret, 1), permuted ? deriveSecret(`${seed}\u0000rank`) : null);
    const seen = [0, 0];
    const part: boolean[] = [];
    for (const k of keys) {
      const cell = dealRecord(table, k.stratum, seen[k.stratum]!++);
      if (cell === 0) part.push(k.stratum === 0);
    }
    return part;
  }

  it('without the permutation the runs test fails (classes interleaved), with it the same test passes', () => {
    // Family-wise alpha: 3 checks of the permuted dealing at 0.001 ≤ 0.003.
    for (const seed of ['model-a', 'model-b', 'model-c']) {
      const before = runsTest(partSequence(seed, false));
      const after = runsTest(partSequence(seed, true));
      expect(before.z, `rank r at position r: z = ${before.z.toFixed(1)}`).toBeGreaterThan(10);
      expect(Math.abs(after.z), `rank r at position π(r): z = ${after.z.toFixed(2)}`).toBeLessThan(Z_001);
    }
  });
});

/** Largest |C_c(t) − t·n_c/n| over positions t and classes c, computed directly. */
function prefixDeviation(seq: number[], k: number): number {
  const total = new Array<number>(k).fill(0);
  for (const c of seq) total[c]!++;
  const seen = new Array<number>(k).fill(0);
  let worst = 0;
  seq.forEach((c, i) => {
    seen[c]!++;
    for (let x = 0; x < k; x++) worst = Math.max(worst, Math.abs(seen[x]! - ((i + 1) * total[x]!) / seq.length));
  });
  return worst;
}

/** Largest |count in window − w·share| over every window of w consecutive positions. */
function windowDeviation(seq: number[], k: number, w: number): number {
  const total = new Array<number>(k).fill(0);
  for (const c of seq) total[c]!++;
  const inWindow = new Array<number>(k).fill(0);
  let worst = 0;
  for (let i = 0; i < seq.length; i++) {
    inWindow[seq[i]!]!++;
    if (i >= w) inWindow[seq[i - w]!]!--;
    if (i >= w - 1) for (let x = 0; x < k; x++) worst = Math.max(worst, Math.abs(inWindow[x]! - (w * total[x]!) / seq.length));
  }
  return worst;
}

describe('--order spread: the guarantee', () => {
  it('every prefix within one record of each share, every window within two, for 300 random class counts', () => {
    const rnd = createRandom(99);
    for (let trial = 0; trial < 300; trial++) {
      const k = 1 + Math.floor(rnd() * 9);
      const counts = Array.from({ length: k }, () => (rnd() < 0.2 ? 0 : 1 + Math.floor(rnd() ** 3 * 800)));
      const order = new SpreadOrder(counts);
      const seq: number[] = [];
      for (let c = order.next(); c >= 0; c = order.next()) seq.push(c);
      const got = new Array<number>(k).fill(0);
      for (const c of seq) got[c]!++;
      expect(got).toEqual(counts);
      expect(prefixDeviation(seq, k)).toBeLessThan(1);
      for (const w of [2, 7, 50]) if (w <= seq.length) expect(windowDeviation(seq, k, w)).toBeLessThan(2);
      const check = new SpreadCheck(counts);
      for (const c of seq) check.add(c);
      expect(check.failure).toBeNull();
    }
  });

  it('the check refuses a random order of the same classes (a test of the test)', () => {
    const rnd = createRandom(5);
    const seq: number[] = Array.from({ length: 4000 }, (_, i) => (i < 3000 ? 0 : i < 3800 ? 1 : 2));
    for (let i = seq.length - 1; i > 0; i--) {
      const j = Math.floor(rnd() * (i + 1));
      [seq[i], seq[j]] = [seq[j]!, seq[i]!];
    }
    const check = new SpreadCheck([3000, 800, 200]);
    for (const c of seq) check.add(c);
    expect(check.failure).not.toBeNull();
    expect(prefixDeviation(seq, 3)).toBeGreaterThan(1);
  });

  it('stays exact for parts far beyond 2^53 / n record pairs (release and deadline as exact quotients)', () => {
    // Counts of a part of 3·10^9 records: positions j·n pass 2^53 for the common class; the
    // first 100,000 positions are checked against BigInt arithmetic.
    const counts = [2_000_000_001, 999_999_998, 1];
    const n = counts.reduce((a, b) => a + b, 0);
    const order = new SpreadOrder(counts);
    const seen = [0n, 0n, 0n];
    for (let t = 1n; t <= 100000n; t++) {
      const c = order.next();
      seen[c]!++;
      for (let x = 0; x < 3; x++) {
        // |C − t·n_c/n| < 1  ⟺  |C·n − t·n_c| < n
        const diff = seen[x]! * BigInt(n) - t * BigInt(counts[x]!);
        expect(diff < BigInt(n) && diff > -BigInt(n)).toBe(true);
      }
    }
  });
});

describe('--order spread, end to end', () => {
  it('spreads each class through every part; the same bytes on any thread count and budget; verify checks it', async () => {
    const input = writeSorted('spread.csv', 20000, [['calm', 0.55], ['gust', 0.3], ['squall', 0.12], ['storm', 0.03]]);
    const a = await shuffle({ inputs: [input], out: join(dir, 'spread-a'), seed: 'spread', partitions: 3, folds: 4, stratify: 'label', order: 'spread', threads: 0 });
    const b = await shuffle({ inputs: [input], out: join(dir, 'spread-b'), seed: 'spread', partitions: 3, folds: 4, stratify: 'label', order: 'spread', threads: 2, memory: '2MiB' });
    expect(b.run.buckets).toBeGreaterThan(1);
    expect(a.output.parts.map((p) => p.sha256)).toEqual(b.output.parts.map((p) => p.sha256));
    expect(a.options.order).toBe('spread');
    for (const part of readParts(join(dir, 'spread-a'), a)) {
      const { ids, k } = categories(part.rows.map((r) => r[2]!));
      expect(prefixDeviation(ids, k)).toBeLessThan(1);
      expect(windowDeviation(ids, k, 40)).toBeLessThan(2);
      // Folds are not spread, but still dealt at random: their pairs look random.
      const folds = serialTest(part.rows.map((r) => Number(r[4])), 4);
      expect(folds.chi2).toBeLessThan(CHI2_001[15]!);
    }
    const report = await verify({ dir: join(dir, 'spread-a') });
    expect(report.ok).toBe(true);
    expect(report.checks.filter((c) => c.check === 'order').map((c) => c.status)).toEqual(['passed', 'passed', 'passed']);
  });

  it('verify names the first record out of place when a spread part is reordered', async () => {
    const out = join(dir, 'spread-a');
    const m = JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as Manifest;
    const path = join(out, m.output.parts[0]!.path);
    const lines = readFileSync(path, 'utf8').split('\n');
    // Every storm record moved to the front: the same records, but the second storm record now
    // comes long before a part of this size owes it.
    const body = lines.slice(1).filter((l) => l !== '');
    const storms = body.filter((l) => l.split(',')[2] === 'storm');
    writeFileSync(path, [lines[0], ...storms, ...body.filter((l) => l.split(',')[2] !== 'storm'), ''].join('\n'));
    const report = await verify({ dir: out });
    const order = report.mismatches.filter((x) => x.check === 'order');
    expect(order).toHaveLength(1);
    expect(order[0]!.line).toBe(3);
    expect(String(order[0]!.expected)).toMatch(/^record 2 of label="storm" between record \d+ and \d+$/);
  });

  it('needs --stratify', async () => {
    const input = writeSorted('spread-bad.csv', 100, [['calm', 1]]);
    await expect(shuffle({ inputs: [input], out: join(dir, 'sb'), order: 'spread' })).rejects.toMatchObject({ code: 'RDK_OPTION' });
  });

  it('with --group and with JSON Lines and gzip output', async () => {
    const input = writeSorted('spread-group.csv', 8000, [['calm', 0.7], ['gust', 0.3]]);
    const g = await shuffle({ inputs: [input], out: join(dir, 'spread-g'), seed: 'sg', partitions: 2, stratify: 'label', group: 'user', order: 'spread' });
    for (const part of readParts(join(dir, 'spread-g'), g)) {
      const { ids, k } = categories(part.rows.map((r) => r[2]!));
      expect(prefixDeviation(ids, k)).toBeLessThan(1);
    }
    const json = join(dir, 'spread.jsonl');
    const { rows } = parseCsv(readPart(input));
    writeFileSync(json, rows.map((r) => JSON.stringify({ id: Number(r[0]), user: r[1], label: r[2] })).join('\n') + '\n');
    const j = await shuffle({ inputs: [json], out: join(dir, 'spread-j'), seed: 'sj', partitions: 2, folds: 3, stratify: 'label', order: 'spread', gzip: true });
    for (const p of j.output.parts) {
      const labels = readPart(join(dir, 'spread-j', p.path)).toString('utf8').trim().split('\n').map((l) => (JSON.parse(l) as { label: string }).label);
      const { ids, k } = categories(labels);
      expect(prefixDeviation(ids, k)).toBeLessThan(1);
    }
    expect((await verify({ dir: join(dir, 'spread-j') })).ok).toBe(true);
  });
});

describe('verify and the order', () => {
  it('grouped: a group split in two runs is named', async () => {
    const input = writeSorted('grouped-verify.csv', 3000, [['calm', 1]], 60);
    const out = join(dir, 'grouped-verify');
    const m = await shuffle({ inputs: [input], out, seed: 'gv', partitions: 1, group: 'user', order: 'grouped' });
    expect((await verify({ dir: out })).ok).toBe(true);
    const path = join(out, m.output.parts[0]!.path);
    const lines = readFileSync(path, 'utf8').split('\n');
    const [first] = lines.splice(1, 1);
    lines.splice(lines.length - 1, 0, first!);
    writeFileSync(path, lines.join('\n'));
    const order = (await verify({ dir: out })).mismatches.filter((x) => x.check === 'order');
    expect(order).toHaveLength(1);
    expect(String(order[0]!.found)).toContain(`user="${first!.split(',')[1]}"`);
  });

  it('an output of dealing scheme 1 (a version 1 manifest) still verifies, and says which scheme wrote it', async () => {
    const input = writeSorted('old.csv', 2000, [['calm', 0.5], ['gust', 0.5]]);
    const out = join(dir, 'old');
    await shuffle({ inputs: [input], out, seed: 'old', partitions: 2, stratify: 'label' });
    // A version 1 manifest has neither field; everything else it checks is the same.
    const path = join(out, 'manifest.json');
    const m = JSON.parse(readFileSync(path, 'utf8')) as Record<string, any>;
    m.manifestVersion = 1;
    delete m.dealingScheme;
    delete m.options.order;
    writeFileSync(path, JSON.stringify(m, null, 2));
    const report = await verify({ dir: out });
    expect(report.ok).toBe(true);
    expect(report.dealingScheme).toBe(1);
    expect(report.order).toBe('interleaved');
    expect(report.checks.find((c) => c.check === 'order')!.note).toContain('scheme 1');
  });
});
