/**
 * The engine's invariants (see docs/design.md and docs/ARCHITECTURE.md), each checked on real runs of `shuffle()` and the
 * outputs re-read with csv-parse, an independent parser.
 */
import { createHash } from 'node:crypto';
import { existsSync, mkdirSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { gzipSync } from 'node:zlib';
import { stringify } from 'csv-stringify/sync';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { shuffle, type Manifest, type ShuffleOptions } from '../src/index.js';
import { BUFFER_CAP, chooseBuckets, spillFactor } from '../src/engine/shuffle.js';
import { READ_BACK_BYTES, STATS_BYTES_PER_COLUMN, statsInLanes } from '../src/engine/part-stats.js';
import { setFlag } from '../src/flags.js';
import { listFiles, makeSensorCsv, makeTempDir, parseCsv, readPart, removeDir, rowMultiset } from './helpers/engine.js';

let dir: string;
let input: string;
let inputText: string;

beforeAll(() => {
  dir = makeTempDir();
  input = join(dir, 'readings.csv');
  // ~1.3 MB: --memory 4MiB cuts it into more buckets than 1GiB does.
  inputText = makeSensorCsv({ rows: 24000, seed: 11, noFinalNewline: true });
  writeFileSync(input, inputText);
});
afterAll(() => removeDir(dir));

function sha(path: string): string {
  return createHash('sha256').update(readFileSync(path)).digest('hex');
}

/** The manifest without the fields that record time, host and the bucket count. */
function stable(m: Manifest): unknown {
  const { run: _run, ...rest } = m;
  return rest;
}

function outputsOf(out: string): Record<string, string> {
  return Object.fromEntries(listFiles(out).filter((f) => f !== 'manifest.json').map((f) => [f, sha(join(out, f))]));
}

describe('invariant 1: a pure function of (seed, inputs, options)', () => {
  it('gives identical bytes for 1 or 2 threads and 4 MiB or 1 GiB of memory', async () => {
    const runs = [
      { threads: 1, memory: '4MiB' },
      { threads: 2, memory: '4MiB' },
      { threads: 2, memory: '1GiB' },
      { threads: 1, memory: '1GiB' },
    ];
    const results = [];
    for (const [k, r] of runs.entries()) {
      const out = join(dir, `inv1-${k}`);
      // With statistics: their exact merge must not depend on how the work was cut up either.
      const m = await shuffle({ inputs: [input], out, seed: 'field-season-7', partitions: 4, stratify: 'fault', folds: 3, stats: true, ...r });
      results.push({ files: outputsOf(out), manifest: stable(m), buckets: m.run.buckets });
    }
    // The runs really were cut up differently...
    expect(results[0]!.buckets).toBeGreaterThan(results[2]!.buckets);
    // ...and still agree byte for byte.
    for (const r of results.slice(1)) {
      expect(r.files).toEqual(results[0]!.files);
      expect(r.manifest).toEqual(results[0]!.manifest);
    }
    expect(Object.keys(results[0]!.files)).toEqual(['part-00000.csv', 'part-00001.csv', 'part-00002.csv', 'part-00003.csv']);
    expect((results[0]!.manifest as Manifest).input.stats).toBeDefined();
  });

  it('gives identical bytes on the calling thread (the default for small inputs) and on workers, in every mode', async () => {
    const jsonl = join(dir, 'inline.jsonl');
    const { header, rows } = parseCsv(inputText);
    writeFileSync(jsonl, rows.slice(0, 5000).map((r) => JSON.stringify(Object.fromEntries(header.map((h, i) => [h, r[i]])))).join('\n') + '\n');
    const modes: [string, Record<string, unknown>][] = [
      ['stratified folds with statistics', { partitions: 3, folds: 4, stratify: 'fault', stats: true }],
      ['groups', { partitions: 2, group: 'sensor', stratify: 'fault', tolerance: 1 }],
      ['hash assignment by key', { partitions: 3, assign: 'hash', key: 'id', stratify: 'fault' }],
      ['named splits and quantile bins', { split: 'train=0.7,test=0.3', stratify: 'reading:bins=4', folds: 2, tolerance: 1 }],
      ['JSON Lines', { partitions: 2, stratify: 'fault', inputs: [jsonl] }],
    ];
    for (const [name, opts] of modes) {
      const runs = [];
      for (const threads of [undefined, 0, 2]) {
        const out = join(dir, `inline-${name.replace(/\W+/g, '-')}-${threads}`);
        const m = await shuffle({ inputs: [input], out, seed: 'inline', ...opts, ...(threads === undefined ? {} : { threads }) });
        // A small input is done on the calling thread unless threads are asked for.
        expect(m.run.threads).toBe(threads ?? 0);
        runs.push({ files: outputsOf(out), manifest: stable(m) });
      }
      expect(Object.keys(runs[0]!.files).length, name).toBeGreaterThan(1);
      expect(runs[1], name).toEqual(runs[0]);
      expect(runs[2], name).toEqual(runs[0]);
    }
  });

  it('gives identical bytes and rejected records whether workers read the input in blocks or this thread reads it', async () => {
    // A gzip input is read on the main thread; the same bytes uncompressed are parsed by the
    // workers in blocks (tiny ones here, so many start inside quoted line breaks).
    const lines = makeSensorCsv({ rows: 6000, seed: 5, crlf: true }).split('\r\n');
    for (let k = 40; k < lines.length - 1; k += 397) lines[k] = `${k},"broken"x,site,1.0,,ok`;
    const text = lines.join('\r\n');
    const plain = join(dir, 'blocks.csv');
    writeFileSync(plain, text);
    const packed = join(dir, 'blocks.csv.gz');
    writeFileSync(packed, gzipSync(text));
    // A second input: each input's blocks are keyed by its own ordinal and offsets.
    const text2 = makeSensorCsv({ rows: 2500, seed: 6 });
    const plain2 = join(dir, 'blocks-2.csv');
    writeFileSync(plain2, text2);
    const packed2 = join(dir, 'blocks-2.csv.gz');
    writeFileSync(packed2, gzipSync(text2));
    const opts = { seed: 'blocks', partitions: 3, stratify: 'fault', folds: 2, onBadRecord: 'quarantine' as const, threads: 2 };
    const restore = setFlag('ROWDECK_BLOCK_BYTES', '3000');
    let mBlocks: Manifest;
    try {
      mBlocks = await shuffle({ inputs: [plain, plain2], out: join(dir, 'inv1-blocks'), ...opts });
    } finally {
      restore();
    }
    const mSeq = await shuffle({ inputs: [packed, packed2], out: join(dir, 'inv1-seq'), ...opts });
    const a = outputsOf(join(dir, 'inv1-blocks'));
    const b = outputsOf(join(dir, 'inv1-seq'));
    delete a['rejected.csv'];
    delete b['rejected.csv'];
    expect(a).toEqual(b);
    expect(mBlocks.input.rejected).toBeGreaterThanOrEqual(15);
    expect(mBlocks.input.rejected).toBe(mSeq.input.rejected);
    expect(mBlocks.output).toEqual(mSeq.output);
    expect(mBlocks.input.fingerprint).toBe(mSeq.input.fingerprint);
    expect(mBlocks.input.records).toBe(mSeq.input.records);
    expect(mBlocks.input.files.map((f) => f.records)).toEqual(mSeq.input.files.map((f) => f.records));
    const rejects = (d: string): string[][] => parseCsv(readFileSync(join(dir, d, 'rejected.csv'))).rows.map((r) => r.slice(1));
    expect(rejects('inv1-blocks')).toEqual(rejects('inv1-seq'));
  });

  it('gives the same bytes, manifest and rejected records when many small inputs are read ahead whole as when each is read in blocks', async () => {
    // 24 files of ~200 records (one gzip, some with a broken record): by default each is read
    // whole, a few ahead (ReadAhead); with 4 KiB blocks none is under two blocks, so the
    // workers read each in blocks, as before read-ahead.
    const paths: string[] = [];
    for (let f = 0; f < 24; f++) {
      const lines = makeSensorCsv({ rows: 200, seed: 100 + f }).split('\n');
      if (f % 5 === 2) lines[7 + f] = `${f},"broken"x,site,1.0,,ok`;
      const text = lines.join('\n');
      const path = join(dir, `shard-${String(f).padStart(2, '0')}.csv${f === 9 ? '.gz' : ''}`);
      writeFileSync(path, f === 9 ? gzipSync(text) : text);
      paths.push(path);
    }
    const opts = { seed: 'shards', partitions: 4, stratify: 'fault', folds: 3, onBadRecord: 'quarantine' as const, threads: 2 };
    const ahead = await shuffle({ inputs: paths, out: join(dir, 'shards-ahead'), ...opts });
    const restore = setFlag('ROWDECK_BLOCK_BYTES', '4096');
    let blocks: Manifest;
    try {
      blocks = await shuffle({ inputs: paths, out: join(dir, 'shards-blocks'), ...opts });
    } finally {
      restore();
    }
    expect(outputsOf(join(dir, 'shards-ahead'))).toEqual(outputsOf(join(dir, 'shards-blocks')));
    expect(ahead.input.rejected).toBe(5);
    expect(ahead.input).toEqual(blocks.input);
    expect(ahead.output).toEqual(blocks.output);
    expect(ahead.input.files.map((f) => f.records)).toEqual(paths.map((_, f) => (f % 5 === 2 ? 199 : 200)));
  });

  it('gives the same bytes and manifest when the workers read the small inputs as when the calling thread does, and the same first error', async () => {
    // 30 small files (one gzip, one JSON Lines shard set): with threads and --on-bad-record fail
    // the workers read and parse every input after the first; with --threads 0 all are read here.
    const csvPaths: string[] = [];
    const jsonPaths: string[] = [];
    let records = 0;
    for (let f = 0; f < 30; f++) {
      const text = makeSensorCsv({ rows: 150, seed: 400 + f });
      records += parseCsv(text).rows.length;
      const path = join(dir, `small-${String(f).padStart(2, '0')}.csv${f === 11 ? '.gz' : ''}`);
      writeFileSync(path, f === 11 ? gzipSync(text) : text);
      csvPaths.push(path);
      if (f < 8) {
        const { header, rows } = parseCsv(text);
        const jpath = join(dir, `small-${f}.jsonl`);
        writeFileSync(jpath, rows.map((r) => JSON.stringify(Object.fromEntries(header.map((h, i) => [h, r[i]])))).join('\n') + '\n');
        jsonPaths.push(jpath);
      }
    }
    for (const [name, paths] of [['csv', csvPaths], ['jsonl', jsonPaths]] as const) {
      const opts = { seed: 'small', partitions: 3, stratify: 'fault', folds: 2 };
      const here = await shuffle({ inputs: paths, out: join(dir, `small-here-${name}`), threads: 0, ...opts });
      const workers = await shuffle({ inputs: paths, out: join(dir, `small-workers-${name}`), threads: 2, ...opts });
      expect(outputsOf(join(dir, `small-workers-${name}`)), name).toEqual(outputsOf(join(dir, `small-here-${name}`)));
      expect(workers.input, name).toEqual(here.input);
      expect(workers.output, name).toEqual(here.output);
      // Every record, as csv-parse counts them.
      if (name === 'csv') expect(here.input.records).toBe(records);
    }
    // A broken record in input 17 and in input 24, and a header that differs in input 20: the
    // error is input 17's, with its file and line, as when the calling thread reads them all.
    const bad = csvPaths.map((p, f) => {
      if (f !== 17 && f !== 20 && f !== 24) return p;
      const lines = makeSensorCsv({ rows: 150, seed: 400 + f }).split('\n');
      if (f === 20) lines[0] = lines[0]!.replace('site', 'place');
      else lines[40] = `${f},"broken"x,site,1.0,,ok`;
      const path = join(dir, `small-bad-${f}.csv`);
      writeFileSync(path, lines.join('\n'));
      return path;
    });
    const errorOf = async (threads: number): Promise<string> => {
      try {
        await shuffle({ inputs: bad, out: join(dir, `small-bad-${threads}`), seed: 'small', partitions: 3, threads });
      } catch (err) {
        return `${(err as { code?: string }).code}: ${(err as Error).message}`;
      }
      return 'no error';
    };
    const here = await errorOf(0);
    expect(here).toMatch(/small-bad-17\.csv/);
    expect(await errorOf(2)).toBe(here);
    expect(existsSync(join(dir, 'small-bad-2'))).toBe(false);
  });

  it('gives a different order for a different seed, and records the seed', async () => {
    const a = await shuffle({ inputs: [input], out: join(dir, 'seed-a'), seed: 'alpha', memory: '4MiB' });
    const b = await shuffle({ inputs: [input], out: join(dir, 'seed-b'), seed: 'beta', memory: '4MiB' });
    expect(a.seed).toBe('alpha');
    expect(b.seed).toBe('beta');
    const ra = parseCsv(readPart(join(dir, 'seed-a', 'part-00000.csv'))).rows.map((r) => r[0]);
    const rb = parseCsv(readPart(join(dir, 'seed-b', 'part-00000.csv'))).rows.map((r) => r[0]);
    expect(ra).not.toEqual(rb);
    // Same records, though.
    expect([...ra].sort()).toEqual([...rb].sort());
  });

  it('uses a fixed default seed when none is given, and says so in the manifest', async () => {
    const a = await shuffle({ inputs: [input], out: join(dir, 'default-a') });
    const b = await shuffle({ inputs: [input], out: join(dir, 'default-b'), threads: 1 });
    expect(a.seedIsDefault).toBe(true);
    expect(typeof a.seed).toBe('string');
    expect(b.seed).toBe(a.seed);
    expect(outputsOf(join(dir, 'default-a'))).toEqual(outputsOf(join(dir, 'default-b')));
  });
});

describe('invariant 2: nothing lost, nothing invented', () => {
  it('outputs exactly the input records, by an independent parse, fold column aside', async () => {
    const out = join(dir, 'inv2');
    const m = await shuffle({ inputs: [input], out, seed: 's', partitions: 3, stratify: 'fault', folds: 4, memory: '4MiB' });
    const ref = parseCsv(inputText);
    const got: string[][] = [];
    for (const p of m.output.parts) {
      const { header, rows } = parseCsv(readPart(join(out, p.path)));
      expect(header).toEqual([...ref.header, 'fold']);
      for (const r of rows) {
        expect(Number(r[r.length - 1])).toBeGreaterThanOrEqual(0);
        expect(Number(r[r.length - 1])).toBeLessThan(4);
        got.push(r.slice(0, -1));
      }
    }
    expect(got.length).toBe(ref.rows.length);
    expect(rowMultiset(got)).toEqual(rowMultiset(ref.rows));
    expect(m.output.fingerprint).toBe(m.input.fingerprint);
    expect(m.output.records).toBe(ref.rows.length);
  });

  it('a spill damaged between the stages stops the run before anything is written', async () => {
    const tmp = join(dir, 'damaged-tmp');
    mkdirSync(tmp);
    const out = join(dir, 'inv2-damaged');
    let damaged = 0;
    const run = shuffle({
      inputs: [input], out, seed: 's', partitions: 2, memory: '4MiB', threads: 1, tempDir: tmp,
      onProgress: (p) => {
        // As stage 2 begins (before any bucket is read, so the timing of the workers cannot let
        // the damage come too late), flip the last byte of every spill file.
        if (p.stage !== 'gather' || p.done !== 0 || damaged) return;
        for (const d of readdirSync(tmp)) {
          for (const f of readdirSync(join(tmp, d)).filter((x) => x.endsWith('.spill'))) {
            const path = join(tmp, d, f);
            const bytes = readFileSync(path);
            bytes[bytes.length - 1]! ^= 0x20;
            writeFileSync(path, bytes);
            damaged++;
          }
        }
      },
    });
    await expect(run).rejects.toMatchObject({ code: 'RDK_INTERNAL', message: expect.stringContaining('were read (fingerprint') });
    expect(damaged).toBeGreaterThan(0);
    expect(existsSync(out)).toBe(false);
  });

  it.each([0, 1])('removes each range of spill files once stage 2 has passed it (threads %i)', async (threads) => {
    const tmp = join(dir, `shrink-tmp-${threads}`);
    mkdirSync(tmp);
    const out = join(dir, `inv2-shrink-${threads}`);
    const spillFiles = (): string[] => readdirSync(tmp).flatMap((d) => readdirSync(join(tmp, d)).filter((x) => x.endsWith('.spill')));
    // Files present at each gather event, by range (scatter-TTTT-RR.spill).
    const seen: { done: number; total: number; ranges: Set<number> }[] = [];
    // One level of buckets (at 1 MiB the budget's own rule would take fewer, larger buckets and
    // split them: the multi-pass layout), 64 of them whatever the threads in flight allow.
    const restoreLayout = setFlag('ROWDECK_LAYOUT', 'spill');
    const restoreBits = setFlag('ROWDECK_BUCKET_BITS', '6');
    const restore = (): void => {
      restoreBits();
      restoreLayout();
    };
    let m: Manifest;
    try {
      m = await shuffle({
        inputs: [input], out, seed: 's', partitions: 2, memory: '1MiB', threads, tempDir: tmp,
        onProgress: (p) => {
          if (p.stage !== 'gather') return;
          seen.push({ done: p.done, total: p.total, ranges: new Set(spillFiles().map((f) => Number(f.slice(-8, -6)))) });
        },
      });
    } finally {
      restore();
    }
    expect(m.run.layout).toBe('spill');
    const total = seen[0]!.total;
    // Enough buckets for every one of the 16 ranges to hold two or more.
    expect(total).toBeGreaterThanOrEqual(32);
    const perRange = total / 16;
    // Stage 2 begins with all 16 ranges on disk.
    expect([...seen[0]!.ranges].sort((a, b) => a - b)).toEqual(Array.from({ length: 16 }, (_, r) => r));
    // No range comes back; none is removed before stage 2 has dealt all its buckets, and none is
    // left once stage 2 has dealt the next range too (removal runs beside the dealing, at most
    // one range behind).
    for (let k = 1; k < seen.length; k++) {
      const { done, ranges } = seen[k]!;
      for (const r of ranges) expect(seen[k - 1]!.ranges.has(r)).toBe(true);
      for (let r = 0; r < 16; r++) {
        if (!ranges.has(r)) expect(done).toBeGreaterThanOrEqual((r + 1) * perRange);
        if (done >= (r + 2) * perRange) expect(ranges.has(r)).toBe(false);
      }
    }
    expect(seen.at(-1)!.ranges.size).toBeLessThanOrEqual(1);
    expect(spillFiles()).toEqual([]);
    expect(m.output.fingerprint).toBe(m.input.fingerprint);
  });

  it('keeps record bytes exactly: CRLF records, embedded line breaks and unicode', async () => {
    const text = makeSensorCsv({ rows: 3000, seed: 5, crlf: true, noFinalNewline: true });
    const file = join(dir, 'crlf.csv');
    writeFileSync(file, text);
    const out = join(dir, 'inv2-crlf');
    const m = await shuffle({ inputs: [file], out, seed: 'crlf', partitions: 2, memory: '4MiB' });
    // Record contents as byte strings, from the reference parser's record boundaries.
    const recordsOf = (t: string): string[] => {
      const rows: string[] = [];
      const parsed = (parseCsvWithRaw(t) as { raw: string }[]).map((r) => r.raw.replace(/\r?\n?$/, ''));
      rows.push(...parsed.slice(1));
      return rows.sort();
    };
    const outRecords: string[] = [];
    for (const p of m.output.parts) {
      const t = readPart(join(out, p.path)).toString('utf8');
      expect(t.endsWith('\r\n')).toBe(true); // the last input record got the input's own line end
      outRecords.push(...recordsOf(t));
    }
    expect(outRecords.sort()).toEqual(recordsOf(text));
  });
});

import { parse } from 'csv-parse/sync';
function parseCsvWithRaw(t: string): unknown[] {
  return parse(t, { raw: true }) as unknown[];
}

describe('invariant 3: exact dealing', () => {
  it('puts every class in every part within one record of its share, and sizes within one', async () => {
    const out = join(dir, 'inv3');
    const P = 7;
    const K = 3;
    const m = await shuffle({ inputs: [input], out, seed: 'deal', partitions: P, stratify: 'fault', folds: K, memory: '4MiB' });
    const totals = m.strata.values.map((v) => v.records);
    const N = totals.reduce((a, b) => a + b, 0);
    const sizes = m.output.parts.map((p) => p.records);
    expect(Math.max(...sizes) - Math.min(...sizes)).toBeLessThanOrEqual(1);
    for (const p of m.output.parts) {
      p.strata.forEach((n, s) => expect(Math.abs(n - totals[s]! / P)).toBeLessThan(1));
      // Inside every partition, each fold holds its share of every class within one.
      for (let f = 0; f < K; f++) {
        p.foldStrata!.forEach((row) => row.forEach((n, s) => expect(Math.abs(n - p.strata[s]! / K)).toBeLessThan(1 + 1e-9)));
        expect(Math.abs(p.folds![f]! - p.records / K)).toBeLessThan(1 + 1e-9);
      }
    }
    // The manifest's counts are what the files hold (recounted with csv-parse).
    for (const p of m.output.parts) {
      const { rows } = parseCsv(readPart(join(out, p.path)));
      const byClass = new Map<string, number>();
      for (const r of rows) byClass.set(r[5]!, (byClass.get(r[5]!) ?? 0) + 1);
      m.strata.values.forEach((v, s) => expect(byClass.get(v.value![0]!) ?? 0).toBe(p.strata[s]));
    }
    expect(N).toBe(24000);
    expect(m.balance.maxDeviation).toBeLessThanOrEqual(m.balance.tolerance);
  });

  it('counts every (part, fold, class) right when there are far more of them than records (many parts, folds and classes)', async () => {
    // 40 parts x 5 folds x ~600 sensors: ~120,000 entries for 8,000 records, so each bucket lists
    // its records' entries instead of sending a table of all of them (see gatherBucket). Half the
    // records are one sensor's, so its entries count about 20 records each, the others' 0 or 1.
    const file = join(dir, 'many-classes.csv');
    const { header: cols, rows: all } = parseCsv(makeSensorCsv({ rows: 8000, seed: 5, sensors: 600 }));
    all.forEach((r, i) => {
      if (i % 2 === 0) r[cols.indexOf('sensor')] = 'S000';
    });
    writeFileSync(file, stringify([cols, ...all]));
    const P = 40;
    const K = 5;
    for (const threads of [0, 2]) {
      const out = join(dir, `many-classes-${threads}`);
      const m = await shuffle({ inputs: [file], out, seed: 'cells', partitions: P, folds: K, stratify: 'sensor', tolerance: 1000, memory: '4MiB', threads });
      const S = m.strata.values.length;
      expect(P * K * S).toBeGreaterThan(8000 / 2 + 1024);
      // Recounted from the files with csv-parse: per part, fold (the last column) and sensor.
      let total = 0;
      for (const p of m.output.parts) {
        const { header, rows } = parseCsv(readPart(join(out, p.path)));
        const sensorAt = header.indexOf('sensor');
        const found = Array.from({ length: K }, () => new Array<number>(S).fill(0));
        const index = new Map(m.strata.values.map((v, s) => [v.value![0]!, s]));
        for (const r of rows) found[Number(r[r.length - 1])]![index.get(r[sensorAt]!)!]!++;
        expect(p.foldStrata).toEqual(found);
        expect(Math.max(...found.flat())).toBeGreaterThanOrEqual(20);
        total += rows.length;
      }
      expect(total).toBe(8000);
    }
  });

  it('deals named splits to exact sizes (fractions, counts, and * for the rest)', async () => {
    const m = await shuffle({ inputs: [input], out: join(dir, 'split-frac'), seed: 'sp', split: 'train=0.8,valid=0.1,test=0.1', stratify: 'fault' });
    expect(m.output.parts.map((p) => [p.path, p.records])).toEqual([
      ['train.csv', 19200],
      ['valid.csv', 2400],
      ['test.csv', 2400],
    ]);
    const totals = m.strata.values.map((v) => v.records);
    for (const [k, p] of m.output.parts.entries()) {
      const w = [0.8, 0.1, 0.1][k]!;
      p.strata.forEach((n, s) => expect(Math.abs(n - totals[s]! * w)).toBeLessThanOrEqual(1));
    }
    const c = await shuffle({ inputs: [input], out: join(dir, 'split-count'), seed: 'sp', split: 'holdout=1000,rest=*', partitions: 2 });
    expect(c.output.parts.map((p) => [p.path, p.records])).toEqual([
      ['holdout/part-00000.csv', 500],
      ['holdout/part-00001.csv', 500],
      ['rest/part-00000.csv', 11500],
      ['rest/part-00001.csv', 11500],
    ]);
    await expect(shuffle({ inputs: [input], out: join(dir, 'split-bad'), split: 'a=1000,b=2000' })).rejects.toMatchObject({ code: 'RDK_SPLIT_SIZES' });
    expect(existsSync(join(dir, 'split-bad'))).toBe(false);
  });
});

describe('invariant 6: the tolerance is checked before anything is written', () => {
  it('refuses a class with fewer records than partitions, naming it and what would work', async () => {
    const text = makeSensorCsv({ rows: 2000, seed: 3, classes: [['ok', 0.998], ['smoke', 0.002]] });
    const file = join(dir, 'rare.csv');
    writeFileSync(file, text);
    const out = join(dir, 'rare-out');
    const err = await shuffle({ inputs: [file], out, partitions: 8, stratify: 'fault' }).catch((e: unknown) => e);
    expect(err).toMatchObject({ code: 'RDK_TOLERANCE' });
    const msg = (err as Error).message;
    expect(msg).toContain('fault="smoke"');
    expect(msg).toContain('4 of 2000');
    expect(msg).toMatch(/fewer partitions/);
    // Spelled as the library is called (the command line says --tolerance 1).
    expect(msg).toContain('a looser tolerance (tolerance: 1 or more)');
    expect(existsSync(out)).toBe(false);
    expect(readdirSync(dir).filter((f) => f.startsWith('.rowdeck-'))).toEqual([]);
    // A looser tolerance lets it through, and the achieved deviation is recorded.
    const m = await shuffle({ inputs: [file], out, partitions: 8, stratify: 'fault', tolerance: 1 });
    expect(m.balance.maxDeviation).toBe(1);
    expect(m.balance.tolerance).toBe(1);
  });
});

describe('invariant 7: failure leaves nothing that looks complete', () => {
  it('a bad record stops the run: no output folder, no manifest, no spill files', async () => {
    const good = makeSensorCsv({ rows: 5000, seed: 9 });
    const lines = good.split('\n');
    lines.splice(3000, 0, '999999,S001,north-ridge,1.5,extra,field,ok');
    const file = join(dir, 'bad.csv');
    writeFileSync(file, lines.join('\n'));
    const out = join(dir, 'bad-out');
    const err = await shuffle({ inputs: [file], out, partitions: 2, memory: '4MiB' }).catch((e: unknown) => e);
    expect(err).toMatchObject({ code: 'RDK_FIELD_COUNT' });
    expect(existsSync(out)).toBe(false);
    expect(readdirSync(dir).filter((f) => f.startsWith('.rowdeck-'))).toEqual([]);
  });

  it('an existing non-empty folder is refused without --force, and replaced whole with it', async () => {
    const out = join(dir, 'exists');
    await shuffle({ inputs: [input], out, partitions: 3 });
    await expect(shuffle({ inputs: [input], out, partitions: 2 })).rejects.toMatchObject({ code: 'RDK_OUTPUT_EXISTS' });
    expect(listFiles(out)).toContain('part-00002.csv');
    await shuffle({ inputs: [input], out, partitions: 2, force: true });
    expect(listFiles(out)).toEqual(['manifest.json', 'part-00000.csv', 'part-00001.csv']);
    // The folder replaced and the spill are gone (removed concurrently at the end of the run).
    expect(readdirSync(dir).filter((f) => f.startsWith('.rowdeck-'))).toEqual([]);
    // Named splits put parts in subfolders; replacing such an output removes those too.
    await shuffle({ inputs: [input], out, partitions: 2, split: 'train=0.8,test=0.2', force: true });
    expect(listFiles(out)).toContain('train/part-00001.csv');
    await shuffle({ inputs: [input], out, partitions: 2, force: true });
    expect(listFiles(out)).toEqual(['manifest.json', 'part-00000.csv', 'part-00001.csv']);
    expect(readdirSync(dir).filter((f) => f.startsWith('.rowdeck-'))).toEqual([]);
  });
});

describe('the memory plan of stage 1', () => {
  const MiB = 1024 * 1024;
  it('keeps every scatter buffer within its share of the budget, and at most BUFFER_CAP a bucket and task', () => {
    for (const memory of [4 * MiB, 64 * MiB, 512 * MiB, 4096 * MiB]) {
      for (const threads of [1, 2, 8]) {
        for (const estimate of [1e3, 1.3e8, 2.6e8, 1.3e9, 1.3e10]) {
          const { bits, bufferBytes } = chooseBuckets(estimate, memory, threads, 2 * threads + 2);
          const buckets = 2 ** bits;
          // Per task (scatter.ts gives each of `threads` tasks bufferBytes / threads).
          const perTask = Math.floor(bufferBytes / threads);
          expect(perTask).toBeLessThanOrEqual(BUFFER_CAP);
          expect(perTask).toBeGreaterThanOrEqual(4096);
          // A quarter of the budget, unless the 4 KiB floor a buffer needs is above it.
          if (perTask > 4096) expect(buckets * bufferBytes).toBeLessThanOrEqual(memory / 4);
        }
      }
    }
  });

  it('no longer grows the buffers with the budget: 100 MB and 1 GB inputs touch 64 KiB a bucket and task', () => {
    // The default budget (512 MiB) and 2 threads, as in the benchmark (bench/run.mjs).
    const small = chooseBuckets(1.3e8, 512 * MiB, 2, 6);
    const big = chooseBuckets(1.3e9, 512 * MiB, 2, 6);
    expect(small.bufferBytes / 2).toBe(64 * 1024);
    expect(big.bufferBytes / 2).toBe(64 * 1024);
    // Stage 1 of the 100 MB input touches 4 MiB of buffers a task (64 buckets of 2 MB), not 64 MiB.
    expect(2 ** small.bits * (small.bufferBytes / 2)).toBe(4 * MiB);
  });
});

describe('the memory plan for short records', () => {
  it('guesses the spill from the head of the input: 1.3x for 100-byte records, ~14x for 2-byte ones, 1.3 for gzip', () => {
    // (record + 24-byte header + 3 of padding) / record, at least 1.3.
    const wide = join(dir, 'hundred.csv');
    writeFileSync(wide, ('x'.repeat(99) + '\n').repeat(20000));
    expect(spillFactor([wide])).toBe(1.3);
    const twenty = join(dir, 'twenty.csv');
    writeFileSync(twenty, ('y'.repeat(19) + '\n').repeat(20000));
    expect(spillFactor([twenty])).toBeCloseTo(47 / 20, 2);
    const tiny = join(dir, 'tiny.csv');
    writeFileSync(tiny, 'bit\n' + '0\n1\n'.repeat(50000));
    // 2 bytes a record: (2 + 24-byte header + 3 of padding) / 2.
    expect(spillFactor([tiny])).toBeCloseTo(14.5, 1);
    const gz = join(dir, 'tiny.csv.gz');
    writeFileSync(gz, gzipSync(readFileSync(tiny)));
    expect(spillFactor([gz])).toBe(1.3);
    expect(spillFactor(['-'])).toBe(1.3);
  });

  it('gives the same bytes for short records whatever the threads and budget (more buckets, smaller blocks)', async () => {
    const tiny = join(dir, 'tiny-classes.csv');
    const rows: string[] = ['c'];
    for (let i = 0; i < 60000; i++) rows.push(String((i * 7919) % 5));
    writeFileSync(tiny, rows.join('\n') + '\n');
    const runs = [];
    for (const [threads, memory] of [[0, '1GiB'], [2, '4MiB'], [1, '64MiB']] as const) {
      const out = join(dir, `tiny-${threads}-${memory}`);
      const m = await shuffle({ inputs: [tiny], out, seed: 't', partitions: 3, stratify: 'c', threads, memory });
      runs.push({ files: outputsOf(out), buckets: m.run.buckets });
    }
    expect(runs[1]!.buckets).toBeGreaterThan(runs[0]!.buckets);
    expect(runs[1]!.files).toEqual(runs[0]!.files);
    expect(runs[2]!.files).toEqual(runs[0]!.files);
  });
});

describe('the memory plan of --stats: per-part statistics in the lanes or read back from the parts', () => {
  const MiB = 1024 * 1024;
  it('keeps the tables in the lanes only while parts x lanes fit a quarter of the budget (or what reading back takes)', () => {
    // 10 columns, 2 lanes: 8 parts take 12.5 MiB of tables at STATS_BYTES_PER_COLUMN, 256 take 400 MiB.
    expect(statsInLanes(10, 8, 2, 512 * MiB)).toBe(true);
    expect(statsInLanes(10, 8, 2, 64 * MiB)).toBe(true); // below READ_BACK_BYTES
    expect(statsInLanes(10, 64, 2, 64 * MiB)).toBe(false);
    expect(statsInLanes(10, 256, 2, 512 * MiB)).toBe(false);
    expect(statsInLanes(10, 256, 2, 8192 * MiB)).toBe(true);
    // The thread count counts: one lane holds half as much.
    const parts = Math.floor((128 * MiB) / (10 * STATS_BYTES_PER_COLUMN));
    expect(statsInLanes(10, parts, 1, 512 * MiB)).toBe(true);
    expect(statsInLanes(10, parts, 2, 512 * MiB)).toBe(false);
    expect(READ_BACK_BYTES).toBeLessThanOrEqual(64 * MiB);
  });

  it('gives the same manifest either way, for CSV with folds, TSV, gzip parts, JSON Lines, on this thread and on workers', async () => {
    const { header, rows } = parseCsv(inputText);
    const tsv = join(dir, 'stats-ways.tsv');
    // Tabs in fields would need quoting; the sensor file has none, checked here.
    expect(rows.some((r) => r.some((v) => v.includes('\t')))).toBe(false);
    writeFileSync(tsv, [header, ...rows.slice(0, 6000)].map((r) => r.map((v) => (/["\r\n]/.test(v) ? `"${v.replaceAll('"', '""')}"` : v)).join('\t')).join('\r\n'));
    const jsonl = join(dir, 'stats-ways.jsonl');
    writeFileSync(jsonl, rows.slice(0, 6000).map((r) => JSON.stringify(Object.fromEntries(header.map((h, i) => [h, i === 0 ? Number(r[i]) : r[i] === '' ? null : r[i]])))).join('\n') + '\n');
    const cases: [string, Partial<ShuffleOptions> & { inputs: string[] }][] = [
      ['CSV, folds', { inputs: [input], partitions: 5, folds: 3, stratify: 'fault' }],
      ['CSV, gzip parts, named splits', { inputs: [input], split: 'train=0.8,test=0.2', gzip: true }],
      ['TSV with CR LF', { inputs: [tsv], partitions: 3, folds: 2 }],
      ['JSON Lines, folds', { inputs: [jsonl], partitions: 3, folds: 2, stratify: 'fault' }],
    ];
    const restore = setFlag('ROWDECK_PART_STATS', undefined); // each run below sets it
    try {
      for (const [name, opts] of cases) {
        for (const threads of [0, 2]) {
          const got: Record<string, { manifest: unknown; files: Record<string, string>; readBack: boolean }> = {};
          for (const way of ['lanes', 'files']) {
            setFlag('ROWDECK_PART_STATS', way);
            const out = join(dir, `stats-ways-${way}`);
            const stages = new Set<string>();
            const m = await shuffle({ out, force: true, seed: 'ways', stats: true, threads, onProgress: (e) => void stages.add(e.stage), ...opts });
            got[way] = { manifest: stable(m), files: outputsOf(out), readBack: stages.has('stats') };
            expect(m.output.parts.every((p) => Array.isArray(p.stats) && (p.stats as unknown[]).length > 0), name).toBe(true);
          }
          // The parts were read back in one run and not in the other...
          expect(got.lanes!.readBack, name).toBe(false);
          expect(got.files!.readBack, name).toBe(true);
          // ...and the outputs and manifests, statistics and all, agree.
          expect(got.files!.files, `${name}, threads ${threads}`).toEqual(got.lanes!.files);
          expect(got.files!.manifest, `${name}, threads ${threads}`).toEqual(got.lanes!.manifest);
        }
      }
    } finally {
      restore();
    }
  });

  it('reads the parts back by itself when there are many, with the statistics a run with few parts adds up to', async () => {
    // 96 parts at --memory 4MiB: far more tables than the lanes may keep.
    const stages = new Set<string>();
    const many = await shuffle({ inputs: [input], out: join(dir, 'stats-many'), seed: 's', partitions: 96, stats: true, memory: '4MiB', threads: 2, onProgress: (e) => void stages.add(e.stage) });
    expect(stages.has('stats')).toBe(true);
    const few = await shuffle({ inputs: [input], out: join(dir, 'stats-few'), seed: 's', partitions: 2, stats: true, memory: '4MiB', threads: 2 });
    // The whole input's statistics do not depend on how it was dealt, nor on the way they were made.
    expect(many.input.stats).toEqual(few.input.stats);
    // Each part's counts are its records (column by column: values and missing ones).
    for (const p of many.output.parts) {
      for (const c of p.stats as { name: string; count: number; missing: number }[]) expect(c.count + c.missing, `${p.path} ${c.name}`).toBe(p.records);
    }
  });
});
