/**
 * The WebAssembly kernels of the two stages: stage 1's appends to the bucket buffers
 * (BucketWriter in src/engine/spill.ts) and stage 2's key-order copy (src/engine/gather-kernel.ts):
 * on synthetic data they write exactly the bytes the JavaScript paths (or a plain concatenation)
 * give and the fingerprints src/core/hash.ts computes; and whole shuffles give the same bytes and
 * manifests with them as without. (test/wasm.test.ts checks that every module's files are what its
 * script makes; test/stats.kernel.test.ts and test/sort.test.ts what those two modules compute.)
 */
import { existsSync, mkdirSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { gatherKernel, useGatherKernel } from '../src/engine/gather-kernel.js';
import { Fingerprint, hashWords3 } from '../src/core/hash.js';
import type { RecordBatch } from '../src/io/batch.js';
import { BucketWriter, HEADER_BYTES, QUEUE, spillFileName } from '../src/engine/spill.js';
import { shuffle, type Manifest } from '../src/index.js';
import { flags, setFlag } from '../src/flags.js';
import { createRandom, listFiles, makeSensorCsv, makeTempDir, removeDir } from './helpers/engine.js';

interface Synthetic {
  spill: Buffer;
  records: Buffer[];
  terms: number[];
  at: Uint32Array;
  lenTerm: Uint32Array;
}

/** A bucket in the spill layout (src/engine/spill.ts): random bytes, lengths 0..300, every terminator kind. */
function syntheticBucket(n: number, seed: number): Synthetic {
  const rnd = createRandom(seed);
  const records: Buffer[] = [];
  const terms: number[] = [];
  const chunks: Buffer[] = [];
  const at = new Uint32Array(n);
  const lenTerm = new Uint32Array(n);
  let word = 0;
  for (let i = 0; i < n; i++) {
    // Mostly short records, some across several 16-byte steps, a few empty.
    const len = rnd() < 0.05 ? 0 : rnd() < 0.8 ? Math.floor(rnd() * 40) : Math.floor(rnd() * 300);
    const rec = Buffer.alloc(len);
    for (let b = 0; b < len; b++) rec[b] = Math.floor(rnd() * 256);
    const term = Math.floor(rnd() * 3);
    const slot = Buffer.alloc(HEADER_BYTES + ((len + 3) & ~3));
    slot.writeUInt32LE(Math.floor(rnd() * 2 ** 32), 0);
    slot.writeUInt32LE(Math.floor(rnd() * 2 ** 32), 4);
    slot.writeUInt32LE(((len << 2) | term) >>> 0, 20);
    rec.copy(slot, HEADER_BYTES);
    records.push(rec);
    terms.push(term);
    chunks.push(slot);
    at[i] = word;
    lenTerm[i] = (len << 2) | term;
    word += slot.length / 4;
  }
  return { spill: Buffer.concat(chunks), records, terms, at, lenTerm };
}

describe('stage 1: BucketWriter writes the same spill file with the module as without', () => {
  let dir: string;
  let restoreSpill: () => void;
  beforeAll(() => {
    dir = makeTempDir();
    restoreSpill = setFlag('ROWDECK_SPILL', undefined);
  });
  afterAll(() => {
    restoreSpill();
    removeDir(dir);
  });

  /** Every spill file the writer made, one after another (ranges without a chunk have none). */
  function spillFiles(w: BucketWriter): Buffer {
    return Buffer.concat(w.paths.filter((p) => existsSync(p)).map((p) => readFileSync(p)));
  }

  /** Random records (lengths 0..300, some past a 4 KiB buffer, every length mod 4), in batches. */
  function batches(seed: number): { data: Buffer; ends: number[] }[] {
    const rnd = createRandom(seed);
    const out: { data: Buffer; ends: number[] }[] = [];
    for (let b = 0; b < 6; b++) {
      const ends: number[] = [];
      const parts: Buffer[] = [];
      let at = 0;
      // Batch 3 holds a record larger than the staging area (the per-record path); batch 5,
      // 5,000 records of 0-2 bytes, more than the module's queue takes at once.
      const count = b === 3 ? 5 : b === 5 ? 5000 : 6000;
      for (let i = 0; i < count; i++) {
        const len = b === 3 && i === 2 ? 9000 : b === 5 ? Math.floor(rnd() * 3) : rnd() < 0.01 ? 5000 + Math.floor(rnd() * 100) : Math.floor(rnd() * 300);
        const rec = Buffer.alloc(len);
        for (let k = 0; k < len; k++) rec[k] = Math.floor(rnd() * 256);
        parts.push(rec);
        at += len;
        ends.push(at);
      }
      out.push({ data: Buffer.concat(parts), ends });
    }
    return out;
  }

  function write(mode: 'js' | 'auto', seed: number): { file: Buffer; w: BucketWriter; fp: Fingerprint; expected: Fingerprint } {
    setFlag('ROWDECK_SPILL', mode === 'js' ? 'js' : undefined);
    const sub = join(dir, `${mode}-${seed}`);
    mkdirSync(sub);
    const fp = new Fingerprint();
    const expected = new Fingerprint();
    // 16 buckets of 4 KiB, staging of 8 KiB: many flushes, some records longer than a buffer.
    const w = new BucketWriter(sub, 0, 16, 4096, fp, 8192);
    const rnd = createRandom(seed + 1);
    let offset = 0;
    for (const { data, ends } of batches(seed)) {
      let staged = 0;
      for (let i = 0; i < ends.length; i++) {
        const start = i === 0 ? 0 : ends[i - 1]!;
        if (i === staged) {
          let j = i + 1;
          while (j < ends.length && ends[j - 1]! - start <= w.stagingBytes) j++;
          if (ends[j - 1]! - start > w.stagingBytes && j > i + 1) j--;
          w.stage(data, start, ends[j - 1]!);
          staged = j;
        }
        w.append(Math.floor(rnd() * 16), Math.floor(rnd() * 2 ** 32), Math.floor(rnd() * 2 ** 32), offset + 2 ** 33, 3, Math.floor(rnd() * 5), data, start, ends[i]!, Math.floor(rnd() * 3));
        expected.addBytes(data, start, ends[i]!);
      }
      offset += data.length;
    }
    w.close();
    return { file: spillFiles(w), w, fp, expected };
  }

  it.each([1, 2])('random records, seed %i: same file, chunks, counts and fingerprint', (seed) => {
    const js = write('js', seed);
    const auto = write('auto', seed);
    expect(auto.file.equals(js.file)).toBe(true);
    expect(auto.w.chunks).toEqual(js.w.chunks);
    expect([...auto.w.bytes]).toEqual([...js.w.bytes]);
    expect([...auto.w.records]).toEqual([...js.w.records]);
    // Both equal the byte-wise fingerprint of hash.ts over the records as given.
    expect([auto.fp.toHex(), auto.fp.count]).toEqual([js.expected.toHex(), js.expected.count]);
    expect([js.fp.toHex(), js.fp.count]).toEqual([js.expected.toHex(), js.expected.count]);
    // One file per range of buckets (16 buckets: one each), named by task and range.
    expect(readdirSync(join(dir, `auto-${seed}`)).sort()).toEqual(Array.from({ length: 16 }, (_, r) => spillFileName(0, r)));
    expect(auto.w.paths).toEqual(Array.from({ length: 16 }, (_, r) => join(dir, `auto-${seed}`, spillFileName(0, r))));
  });

  it('enqueueRun keys, buckets and counts records as append does with hash.ts keys (offsets past 2^32)', () => {
    setFlag('ROWDECK_SPILL', undefined);
    const secret = Uint32Array.of(0x01234567, 0x89abcdef, 0xdeadbeef, 0x0badf00d);
    const bits = 4;
    const write2 = (how: 'enqueue' | 'append') => {
      const sub = join(dir, `keyed-${how}`);
      mkdirSync(sub);
      const w = new BucketWriter(sub, 0, 1 << bits, 4096, new Fingerprint(), 8192);
      w.setKeySecret(secret);
      const counts = Array.from({ length: 5 }, () => new Uint32Array(1 << bits));
      const rnd = createRandom(7);
      for (const { data, ends } of batches(3).filter((_, b) => b !== 3)) {
        // Records end with nothing, LF or CR LF before the next; offsets near 2^33 and 2^40.
        const n = ends.length;
        const batch = {
          data, count: n, start: new Uint32Array(n), end: new Uint32Array(n), next: new Uint32Array(n),
          offset: new Float64Array(n), strata: new Int32Array(n),
        };
        for (let i = 0; i < n; i++) {
          batch.start[i] = i === 0 ? 0 : ends[i - 1]!;
          batch.next[i] = ends[i]!;
          batch.end[i] = Math.max(batch.start[i]!, ends[i]! - Math.floor(rnd() * 3));
          batch.offset[i] = (rnd() < 0.5 ? 2 ** 33 : 2 ** 40) + Math.floor(rnd() * 2 ** 32);
          batch.strata[i] = Math.floor(rnd() * 5);
        }
        for (let i = 0; i < n; ) {
          let j = i + 1;
          while (j < n && j - i < QUEUE && batch.next[j]! - batch.start[i]! <= w.stagingBytes) j++;
          w.stage(data, batch.start[i]!, batch.next[j - 1]!);
          if (how === 'enqueue') {
            w.runStrata.set(batch.strata.subarray(i, j));
            w.enqueueRun(batch as unknown as RecordBatch, i, j, 3, bits, counts);
          } else {
            for (let k = i; k < j; k++) {
              const off = batch.offset[k]!;
              const h = hashWords3(secret, 3, Math.floor(off / 2 ** 32), off >>> 0);
              const bucket = h[0]! >>> (32 - bits);
              w.append(bucket, h[0]!, h[1]!, off, 3, batch.strata[k]!, data, batch.start[k]!, batch.end[k]!, batch.next[k]! - batch.end[k]!);
              counts[batch.strata[k]!]![bucket]!++;
            }
          }
          i = j;
        }
      }
      w.close();
      return { file: spillFiles(w), w, counts };
    };
    const a = write2('append');
    const e = write2('enqueue');
    expect(e.w.enqueues).toBe(true);
    expect(e.file.length).toBeGreaterThan(100_000);
    expect(e.file.equals(a.file)).toBe(true);
    expect(e.w.chunks).toEqual(a.w.chunks);
    expect([...e.w.bytes]).toEqual([...a.w.bytes]);
    expect([...e.w.records]).toEqual([...a.w.records]);
    expect(e.counts.map((c) => [...c])).toEqual(a.counts.map((c) => [...c]));
  });
});

describe('stage 2: the kernel on synthetic buckets', () => {
  // The module's own tests run whatever ROWDECK_GATHER says (test/wasm.test.ts checks the switch);
  // where the module does not run, they fail rather than skip.
  useGatherKernel(true);
  const kernel = gatherKernel();
  afterAll(() => useGatherKernel(flags.gather !== 'js'));
  it('runs on this Node', () => {
    expect(kernel).not.toBeNull();
  });
  const cases = [
    { parts: 1, K: 1, crlf: false, fold: false },
    { parts: 3, K: 1, crlf: true, fold: false },
    { parts: 8, K: 5, crlf: false, fold: true },
    { parts: 2, K: 12, crlf: true, fold: true },
  ];
  it.each(cases)('parts $parts, folds $K, CR LF default $crlf, fold column $fold', ({ parts, K, crlf, fold }) => {
    const n = 2500;
    const s = syntheticBucket(n, parts * 100 + K);
    const rnd = createRandom(K * 7 + parts);
    // A random key order and random cells, one part left empty when there are several.
    const order = Uint32Array.from({ length: n }, (_, i) => i);
    for (let i = n - 1; i > 0; i--) {
      const j = Math.floor(rnd() * (i + 1));
      [order[i], order[j]] = [order[j]!, order[i]!];
    }
    const cells = parts * K;
    const cellOfRec = Uint32Array.from({ length: n }, () => {
      const c = Math.floor(rnd() * cells);
      return parts > 1 && Math.floor(c / K) === 1 ? 0 : c;
    });
    const foldBytes = fold ? Array.from({ length: K }, (_, f) => Buffer.from(`;${f}`, 'latin1')) : null;
    // What each part must hold: its records in key order, fold field, line end; built plainly.
    const expected: Buffer[][] = Array.from({ length: parts }, () => []);
    const fpsExpected = Array.from({ length: parts }, () => new Fingerprint());
    for (let k = 0; k < n; k++) {
      const i = order[k]!;
      const part = Math.floor(cellOfRec[i]! / K);
      const term = s.terms[i]!;
      const eol = term === 1 ? '\n' : term === 2 ? '\r\n' : crlf ? '\r\n' : '\n';
      expected[part]!.push(s.records[i]!, foldBytes ? foldBytes[cellOfRec[i]! % K]! : Buffer.alloc(0), Buffer.from(eol, 'latin1'));
      // hash.ts's byte-wise fingerprint of the record's own bytes (not the padded copy).
      fpsExpected[part]!.addBytes(s.records[i]!, 0, s.records[i]!.length);
    }
    const partBytes = expected.map((chunks) => Buffer.concat(chunks));
    const partStart = new Float64Array(parts + 1);
    for (let p = 0; p < parts; p++) partStart[p + 1] = partStart[p]! + partBytes[p]!.length;

    const outCap = partStart[parts]!;
    const input = kernel!.reserve(s.spill.length, outCap, Math.floor(s.spill.length / HEADER_BYTES), parts, fold ? K : 0)!;
    input.set(s.spill);
    // The output buffer is filled with a marker: every byte must be overwritten, none past the end.
    const target = new Uint8Array(outCap + 64).fill(0xee);
    const fps = Array.from({ length: parts }, () => new Fingerprint());
    kernel!.deal({ order, n, cellOfRec, at: s.at, lenTerm: s.lenTerm, partStart, K, crlf, foldBytes }, target, fps);
    expect(Buffer.from(target.subarray(0, outCap)).equals(Buffer.concat(partBytes))).toBe(true);
    expect(target.subarray(outCap).every((b) => b === 0xee)).toBe(true);
    expect(fps.map((f) => [f.toHex(), f.count])).toEqual(fpsExpected.map((f) => [f.toHex(), f.count]));
  });

  it('refuses to deal more records than were reserved', () => {
    const s = syntheticBucket(10, 3);
    kernel!.reserve(s.spill.length, 4096, 5, 1, 0);
    const order = Uint32Array.from({ length: 10 }, (_, i) => i);
    const call = () =>
      kernel!.deal({ order, n: 10, cellOfRec: new Uint32Array(10), at: s.at, lenTerm: s.lenTerm, partStart: Float64Array.of(0, 4096), K: 1, crlf: false, foldBytes: null }, new Uint8Array(4096), [new Fingerprint()]);
    expect(call).toThrow(/beyond what was reserved/);
  });
});

describe('whole shuffles: the same bytes with the kernels and with JavaScript alone', () => {
  let dir: string;
  let csv: string;
  let crlf: string;
  let jsonl: string;
  let long: string;
  /** The kernels whose switch the runs set (the statistics and the sort are compared elsewhere). */
  const SWITCHES = ['ROWDECK_GATHER', 'ROWDECK_SPILL', 'ROWDECK_JSONL'] as const;
  let restore: (() => void)[] = [];
  beforeAll(() => {
    restore = SWITCHES.map((name) => setFlag(name, undefined));
    dir = makeTempDir();
    // One record of 3 MiB, longer than stage 1's staging area (2 MiB): it is keyed and appended
    // on its own, between runs the spill module keys.
    long = join(dir, 'long-record.csv');
    const rows = ['id,note,fault'];
    for (let i = 0; i < 4000; i++) rows.push(i === 1500 ? `${i},"${'x, "" y\n'.repeat(3 << 17)}",spike` : `${i},n${i % 7},${['ok', 'drift', 'spike'][i % 3]}`);
    writeFileSync(long, rows.join('\n') + '\n');
    csv = join(dir, 'readings.csv');
    writeFileSync(csv, makeSensorCsv({ rows: 4000, seed: 11 }));
    crlf = join(dir, 'readings-crlf.csv');
    writeFileSync(crlf, makeSensorCsv({ rows: 3000, seed: 12, crlf: true, noFinalNewline: true }));
    jsonl = join(dir, 'readings.jsonl');
    const rnd = createRandom(13);
    const lines: string[] = [];
    for (let i = 0; i < 3000; i++) lines.push(i % 97 === 50 ? '{}' : JSON.stringify({ id: i, fault: ['ok', 'drift', 'spike'][Math.floor(rnd() * 3)], note: rnd() < 0.2 ? 'gust "40"' : null }));
    writeFileSync(jsonl, lines.join('\n'));
  });
  afterAll(() => {
    for (const put of restore.reverse()) put();
    removeDir(dir);
  });

  /** Every file of a run, the manifest without its clock readings. */
  function snapshot(out: string, m: Manifest): Record<string, string> {
    const files: Record<string, string> = {};
    for (const f of listFiles(out)) if (f !== 'manifest.json') files[f] = readFileSync(join(out, f)).toString('base64');
    const { createdAt: _c, timingsMs: _t, ...run } = m.run as unknown as Record<string, unknown>;
    files['manifest'] = JSON.stringify({ ...m, run });
    return files;
  }

  const configs: [string, () => string, Record<string, unknown>][] = [
    ['CSV, stratified, 8 partitions', () => csv, { partitions: 8, stratify: 'fault' }],
    ['CSV, 5 folds and named splits', () => csv, { split: 'train=0.8,test=0.2', folds: 5, stratify: 'fault' }],
    ['CSV with CR LF and no final line end, 3 folds, statistics', () => crlf, { partitions: 3, folds: 3, stats: true }],
    ['JSON Lines, 4 partitions', () => jsonl, { partitions: 4, stratify: 'fault' }],
    ['CSV with a record longer than the staging area', () => long, { partitions: 4, stratify: 'fault', memory: '64MiB' }],
    ['JSON Lines with a fold field (JavaScript either way)', () => jsonl, { partitions: 2, folds: 4 }],
  ];
  it.each(configs)('%s', async (name, input, opts) => {
    const runs: Record<string, string>[] = [];
    for (const mode of ['js', 'auto']) {
      // Worker threads copy the environment when they start (setFlag sets it).
      for (const name of SWITCHES) setFlag(name, mode === 'js' ? 'js' : undefined);
      const out = join(dir, `${name.replace(/\W+/g, '-')}-${mode}`);
      const m = await shuffle({ inputs: [input()], out, seed: 'kernel', memory: '4MiB', threads: 2, ...opts });
      runs.push(snapshot(out, m));
    }
    expect(Object.keys(runs[1]!).length).toBeGreaterThan(2);
    expect(runs[1]).toEqual(runs[0]);
  });
});
