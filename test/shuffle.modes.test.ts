/**
 * Dealing modes and formats: groups, hash assignment, JSON Lines, gzip, several inputs,
 * rejected records. Outputs are re-read with csv-parse / JSON.parse, never with the engine's
 * own reader.
 */
import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { gzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import seedrandom from 'seedrandom';
import { runShuffle, shuffle, verify } from '../src/index.js';
import { formatShuffleSummary } from '../src/cli/summary.js';
import { selectRanks } from '../src/engine/quantiles.js';
import { binValueAt } from '../src/core/bins.js';
import { FieldKind, type RecordBatch } from '../src/io/batch.js';
import { listFiles, makeSensorCsv, makeTempDir, parseCsv, readPart, removeDir, rowMultiset } from './helpers/engine.js';

let dir: string;
let input: string;
let inputText: string;

beforeAll(() => {
  dir = makeTempDir();
  input = join(dir, 'readings.csv');
  inputText = makeSensorCsv({ rows: 6000, seed: 21, sensors: 120 });
  writeFileSync(input, inputText);
});
afterAll(() => removeDir(dir));

describe('--group keeps every group in one part', () => {
  it('never splits a sensor over folds or partitions, and keeps classes near their share', async () => {
    const out = join(dir, 'group');
    const m = await shuffle({ inputs: [input], out, seed: 'g', partitions: 2, folds: 3, group: 'sensor', stratify: 'fault', tolerance: 1 });
    const cellOfSensor = new Map<string, string>();
    let rows = 0;
    for (const p of m.output.parts) {
      for (const r of parseCsv(readPart(join(out, p.path))).rows) {
        const cell = `${p.path}#${r[6]}`;
        const seen = cellOfSensor.get(r[1]!);
        if (seen !== undefined) expect(seen).toBe(cell);
        cellOfSensor.set(r[1]!, cell);
        rows++;
      }
    }
    expect(rows).toBe(6000);
    expect(cellOfSensor.size).toBe(120);
    // 120 groups over 6 cells: each class stays within a modest deviation, which is reported.
    expect(m.balance.maxDeviation).toBeGreaterThan(0);
    expect(m.balance.maxDeviation).toBeLessThan(0.5);
    const sizes = m.output.parts.map((p) => p.records);
    expect(Math.abs(sizes[0]! - sizes[1]!)).toBeLessThan(300);
    expect(m.options.assign).toBe('group');
  });

  it('gives the same groups the same parts whatever the thread count or memory', async () => {
    const a = await shuffle({ inputs: [input], out: join(dir, 'group-a'), seed: 'g2', partitions: 3, group: 'sensor', threads: 1, memory: '2MiB' });
    const b = await shuffle({ inputs: [input], out: join(dir, 'group-b'), seed: 'g2', partitions: 3, group: 'sensor', threads: 2, memory: '1GiB' });
    expect(a.output.parts.map((p) => p.sha256)).toEqual(b.output.parts.map((p) => p.sha256));
  });
});

describe('--group with thousands of groups of mixed classes', () => {
  it('keeps each in one cell, the same on 1 or 2 threads, with the manifest counting what the files hold', async () => {
    // ~4,000 sensors of ~5 records each, their classes mixed: most groups hold several classes.
    const file = join(dir, 'many-groups.csv');
    writeFileSync(file, makeSensorCsv({ rows: 20000, seed: 33, sensors: 4000 }));
    const runs = [];
    for (const threads of [1, 2]) {
      const out = join(dir, `many-groups-${threads}`);
      const m = await shuffle({ inputs: [file], out, seed: 'mg', partitions: 4, folds: 2, group: 'sensor', stratify: 'fault', tolerance: 1, threads, memory: threads === 1 ? '2MiB' : '1GiB' });
      const cellOf = new Map<string, string>();
      const classesOf = new Map<string, Set<string>>();
      for (const p of m.output.parts) {
        const { header, rows } = parseCsv(readPart(join(out, p.path)));
        const [sensorAt, faultAt] = [header.indexOf('sensor'), header.indexOf('fault')];
        const byClass = new Map<string, number>();
        for (const r of rows) {
          const cell = `${p.path}#${r[r.length - 1]}`;
          const seen = cellOf.get(r[sensorAt]!);
          if (seen !== undefined) expect(seen).toBe(cell);
          cellOf.set(r[sensorAt]!, cell);
          classesOf.set(r[sensorAt]!, (classesOf.get(r[sensorAt]!) ?? new Set()).add(r[faultAt]!));
          byClass.set(r[faultAt]!, (byClass.get(r[faultAt]!) ?? 0) + 1);
        }
        m.strata.values.forEach((v, s) => expect(byClass.get(v.value![0]!) ?? 0).toBe(p.strata[s]));
      }
      expect(cellOf.size).toBeGreaterThan(3900);
      expect([...classesOf.values()].filter((c) => c.size > 1).length).toBeGreaterThan(cellOf.size / 2);
      // Small groups over 8 cells: the classes come out close to their shares.
      expect(m.balance.maxDeviation).toBeLessThan(0.1);
      runs.push(m.output.parts.map((p) => p.sha256));
    }
    expect(runs[1]).toEqual(runs[0]);
  });
});

describe('--group: a value is the same group quoted or not', () => {
  it('puts "S7" and S7 in one cell (a plain value is hashed where it lies, a quoted one after unquoting)', async () => {
    const file = join(dir, 'quoted-groups.csv');
    const lines = ['id,sensor,fault'];
    for (let i = 0; i < 3000; i++) {
      // 149 sensors and every third record quoted: each sensor comes both ways.
      const sensor = `S${i % 149}`;
      lines.push(`${i},${i % 3 === 0 ? `"${sensor}"` : sensor},${i % 7 === 0 ? 'drift' : 'ok'}`);
    }
    writeFileSync(file, lines.join('\n') + '\n');
    const out = join(dir, 'quoted-groups');
    const m = await shuffle({ inputs: [file], out, seed: 'q', partitions: 4, folds: 2, group: 'sensor', stratify: 'fault', tolerance: 2 });
    const cellOf = new Map<string, string>();
    for (const p of m.output.parts) {
      for (const r of parseCsv(readPart(join(out, p.path))).rows) {
        const cell = `${p.path}#${r[3]}`;
        const seen = cellOf.get(r[1]!);
        if (seen !== undefined) expect(seen, r[1]).toBe(cell);
        cellOf.set(r[1]!, cell);
      }
    }
    expect(cellOf.size).toBe(149);
  });
});

describe('--assign hash', () => {
  it('keeps the part of every old record when records are appended', async () => {
    const older = join(dir, 'older.csv');
    const lines = inputText.trimEnd().split('\n');
    // Records are one line each here only when their note is not multi-line: keep it simple and
    // take the rows csv-parse sees, rewriting them without line breaks in notes.
    const { header, rows } = parseCsv(inputText);
    const flat = rows.map((r) => r.map((f) => (/[",\n\r]/.test(f) ? `"${f.replaceAll('"', '""').replace(/[\r\n]+/g, ' ')}"` : f)).join(','));
    void lines;
    writeFileSync(older, [header.join(','), ...flat.slice(0, 4000)].join('\n') + '\n');
    const newer = join(dir, 'newer.csv');
    writeFileSync(newer, [header.join(','), ...flat].join('\n') + '\n');
    const partOf = async (file: string, out: string): Promise<Map<string, string>> => {
      const m = await shuffle({ inputs: [file], out, seed: 'stable', partitions: 4, assign: 'hash', key: 'id', stratify: 'fault' });
      const map = new Map<string, string>();
      for (const p of m.output.parts) for (const r of parseCsv(readPart(join(out, p.path))).rows) map.set(r[0]!, p.path);
      return map;
    };
    const before = await partOf(older, join(dir, 'hash-old'));
    const after = await partOf(newer, join(dir, 'hash-new'));
    expect(before.size).toBe(4000);
    for (const [id, part] of before) expect(after.get(id)).toBe(part);
    // Proportions are approximate but close: each part within 10% of a quarter.
    const counts = new Map<string, number>();
    for (const p of after.values()) counts.set(p, (counts.get(p) ?? 0) + 1);
    for (const c of counts.values()) expect(Math.abs(c - 1500)).toBeLessThan(150);
  });

  it('needs --key, and split weights as fractions', async () => {
    await expect(shuffle({ inputs: [input], out: join(dir, 'nokey'), assign: 'hash' })).rejects.toMatchObject({ code: 'RDK_OPTION' });
    await expect(shuffle({ inputs: [input], out: join(dir, 'hashcounts'), assign: 'hash', key: 'id', split: 'a=100,b=*' })).rejects.toMatchObject({ code: 'RDK_OPTION' });
    expect(existsSync(join(dir, 'hashcounts'))).toBe(false);
  });

  it('counts cells while scattering: the manifest matches the files', async () => {
    const m = await shuffle({ inputs: [input], out: join(dir, 'hash-split'), seed: 'hs', assign: 'hash', key: 'id', split: 'train=0.75,test=0.25', folds: 3, stratify: 'fault' });
    for (const p of m.output.parts) {
      const { rows } = parseCsv(readPart(join(dir, 'hash-split', p.path)));
      expect(rows.length).toBe(p.records);
      const folds = [0, 0, 0];
      for (const r of rows) folds[Number(r[r.length - 1])]!++;
      expect(folds).toEqual(p.folds);
    }
    expect(m.output.records).toBe(6000);
    // verify recomputes the deviation from the files: it must equal the one checked in advance.
    const report = await verify({ dir: join(dir, 'hash-split') });
    expect(report.ok).toBe(true);
  });

  it('enforces no tolerance: a small input whose hashed shares stray far still runs, and the summary says what was kept', async () => {
    // 60 readings, 6 of the rare class, over 4 parts by key hash: the rare class cannot land
    // near a quarter in every part (1.5 records each), so the deviation is far above 0.5.
    const rows = Array.from({ length: 60 }, (_, i) => `${i},${i % 10 === 0 ? 'dead' : 'ok'}`);
    const file = join(dir, 'small-hash.csv');
    writeFileSync(file, `id,fault\n${rows.join('\n')}\n`);
    const out = join(dir, 'small-hash');
    const m = await shuffle({ inputs: [file], out, seed: 'tiny', partitions: 4, assign: 'hash', key: 'id', stratify: 'fault' });
    expect(m.balance.maxDeviation).toBeGreaterThan(m.balance.tolerance);
    const r = await verify({ dir: out });
    expect(r.ok).toBe(true);
    expect(r.checks.find((c) => c.file === 'manifest.json' && c.check === 'tolerance')).toMatchObject({ status: 'skipped' });
    const summary = formatShuffleSummary(m, { width: 100, out, report: null, table: false });
    expect(summary[0]).toContain(', parts by key hash, class shares reported, not enforced: max class deviation ');
    expect(summary[1]).toMatch(/^rowdeck: part sizes \d+ to \d+ records \(target 15 each\): what the key hash gives, not dealt exactly\.$/);
    // A tolerance asked for with hash would be a promise not kept: refused.
    await expect(shuffle({ inputs: [file], out: join(dir, 'hash-tol'), partitions: 4, assign: 'hash', key: 'id', tolerance: 0.5 })).rejects.toMatchObject({ code: 'RDK_OPTION', details: { option: 'tolerance' } });
  });
});

describe('formats', () => {
  it('JSON Lines: a fold field is added to each object, everything else kept', async () => {
    const file = join(dir, 'events.jsonl');
    const objs = Array.from({ length: 500 }, (_, i) => ({ id: i, sensor: `S${i % 9}`, fault: i % 5 === 0 ? 'spike' : 'ok', note: i % 7 ? 'a,"b"' : null }));
    const text = objs.map((o) => JSON.stringify(o)).join('\n') + '\n{}\n';
    writeFileSync(file, text);
    const out = join(dir, 'jsonl');
    const m = await shuffle({ inputs: [file], out, seed: 'j', partitions: 2, folds: 4, stratify: 'fault', tolerance: 4 });
    expect(listFiles(out)).toEqual(['manifest.json', 'part-00000.jsonl', 'part-00001.jsonl']);
    const back: unknown[] = [];
    for (const p of m.output.parts) {
      for (const line of readFileSync(join(out, p.path), 'utf8').split('\n').filter(Boolean)) {
        const o = JSON.parse(line) as Record<string, unknown>;
        expect(typeof o.fold).toBe('number');
        const { fold: _f, ...rest } = o;
        back.push(rest);
      }
    }
    expect(back.map((o) => JSON.stringify(o)).sort()).toEqual([...objs.map((o) => JSON.stringify(o)), '{}'].sort());
    // The empty object's missing class is a stratum of its own.
    expect(m.strata.values.map((v) => v.value)).toEqual([['ok'], ['spike'], [null]]);
  });

  it('gzip in and out: the same records, and compressed parts as reproducible as plain ones', async () => {
    const gz = join(dir, 'readings.csv.gz');
    writeFileSync(gz, gzipSync(inputText));
    const plain = await shuffle({ inputs: [input], out: join(dir, 'plain'), seed: 'z', partitions: 2 });
    const a = await shuffle({ inputs: [gz], out: join(dir, 'gz-a'), seed: 'z', partitions: 2, gzip: true, threads: 1, memory: '2MiB' });
    const b = await shuffle({ inputs: [gz], out: join(dir, 'gz-b'), seed: 'z', partitions: 2, gzip: true, threads: 2 });
    expect(a.output.parts.map((p) => p.path)).toEqual(['part-00000.csv.gz', 'part-00001.csv.gz']);
    expect(a.output.parts.map((p) => p.sha256)).toEqual(b.output.parts.map((p) => p.sha256));
    for (const [k, p] of a.output.parts.entries()) {
      expect(readPart(join(dir, 'gz-a', p.path)).equals(readFileSync(join(dir, 'plain', plain.output.parts[k]!.path)))).toBe(true);
    }
  });

  it('several inputs are one data set; the order of records does not depend on which file they came from', async () => {
    const { header, rows } = parseCsv(inputText);
    const toCsv = (rs: string[][]): string =>
      [header, ...rs].map((r) => r.map((f) => (/[",\n\r]/.test(f) ? `"${f.replaceAll('"', '""')}"` : f)).join(',')).join('\n') + '\n';
    const f1 = join(dir, 'day1.csv');
    const f2 = join(dir, 'day2.csv');
    writeFileSync(f1, toCsv(rows.slice(0, 2500)));
    writeFileSync(f2, toCsv(rows.slice(2500)));
    const m = await shuffle({ inputs: [f1, f2], out: join(dir, 'two'), seed: 't', partitions: 3, stratify: 'fault' });
    expect(m.input.files.map((f) => [f.path, f.records])).toEqual([
      [f1, 2500],
      [f2, 3500],
    ]);
    const got: string[][] = [];
    for (const p of m.output.parts) got.push(...parseCsv(readPart(join(dir, 'two', p.path))).rows);
    expect(rowMultiset(got)).toEqual(rowMultiset(rows));
    const other = join(dir, 'other.csv');
    writeFileSync(other, 'id,sensor,site,reading,notes,fault\n1,S1,x,1,,ok\n');
    await expect(shuffle({ inputs: [f1, other], out: join(dir, 'mismatch') })).rejects.toMatchObject({ code: 'RDK_HEADER_MISMATCH' });
  });
});

describe('--on-bad-record', () => {
  const bad = (): string => {
    const lines = makeSensorCsv({ rows: 1000, seed: 4 }).split('\n');
    lines.splice(10, 0, '1,2,3');
    lines.splice(500, 0, 'x,S1,north-ridge,1.0,"never closed,ok');
    return lines.join('\n');
  };

  it('skip: leaves bad records out and counts them', async () => {
    const file = join(dir, 'bad-skip.csv');
    writeFileSync(file, bad());
    const m = await shuffle({ inputs: [file], out: join(dir, 'skip'), onBadRecord: 'skip', partitions: 2 });
    expect(m.input.rejected).toBeGreaterThanOrEqual(1);
    expect(m.input.files[0]!.rejected).toBe(m.input.rejected);
    expect(m.output.records).toBe(m.input.records);
    expect(existsSync(join(dir, 'skip', 'rejected.csv'))).toBe(false);
  });

  it('quarantine: writes each rejected record with its line number and reason', async () => {
    const file = join(dir, 'bad-q.csv');
    writeFileSync(file, bad());
    const m = await shuffle({ inputs: [file], out: join(dir, 'quarantine'), onBadRecord: 'quarantine' });
    expect(m.input.rejectsFile).toBe('rejected.csv');
    const { header, rows } = parseCsv(readFileSync(join(dir, 'quarantine', 'rejected.csv')));
    expect(header).toEqual(['file', 'line', 'code', 'reason', 'record']);
    expect(rows.length).toBe(m.input.rejected);
    expect(rows[0]!.slice(0, 3)).toEqual([file, '11', 'RDK_FIELD_COUNT']);
    expect(rows[0]![4]).toBe('1,2,3');
    // The reason says what was wrong, not to pass the option that put it there.
    expect(rows[0]![3]).toMatch(/^record has 3 fields, the header has 6\. Quote fields that contain .*\.$/);
    for (const r of rows) expect(r[3]).not.toContain('--on-bad-record');
    for (const r of rows) expect(r[3]).toMatch(/\.$/);
  });
});

describe('--group with fewer or lumpier groups than parts', () => {
  /** Six sites of very unequal size: 1,200 readings over 8 partitions and 2 folds. */
  const lumpy = (): string => {
    const sites = [['north', 500], ['south', 300], ['east', 200], ['west', 100], ['ridge', 60], ['bend', 40]] as const;
    const rows: string[] = [];
    let id = 0;
    for (const [site, n] of sites) for (let k = 0; k < n; k++) rows.push(`${id++},${site},${k % 4 === 0 ? 'drift' : 'ok'}`);
    return `id,site,fault\n${rows.join('\n')}\n`;
  };

  it('warns before writing, with the sizes achieved, and still writes a correct output', async () => {
    const file = join(dir, 'lumpy.csv');
    writeFileSync(file, lumpy());
    const notices: string[] = [];
    const out = join(dir, 'lumpy');
    const run = await runShuffle({ inputs: [file], out, seed: 'sites', partitions: 8, folds: 2, group: 'site', onNotice: (t) => notices.push(t) });
    const m = run.manifest;
    const sizes = m.output.parts.map((p) => p.records);
    // Six groups for eight parts: at least two parts are empty, and the warning says which.
    const empty = m.output.parts.filter((p) => p.records === 0).map((p) => p.path);
    expect(empty.length).toBeGreaterThanOrEqual(2);
    expect(run.warnings).toEqual(notices);
    const partWarning = notices.find((t) => t.includes(' parts: '))!;
    expect(partWarning).toContain(`warning: group "site": 6 groups for 8 parts: ${empty.length} parts get no records (${empty.slice(0, 3).join(', ')}${empty.length > 3 ? ', …' : ''}); `);
    expect(partWarning).toContain(`part sizes run from 0 to ${Math.max(...sizes).toLocaleString('en-US')} records against a target of 150 each`);
    expect(partWarning).toContain('more than the tolerance 0.5');
    // The folds: warned about exactly when one strays past the tolerance (or is empty).
    const folds = [0, 1].map((f) => m.output.parts.reduce((a, p) => a + p.folds![f]!, 0));
    const foldWarning = notices.find((t) => t.includes(' folds: '));
    if (Math.max(...folds.map((n) => Math.abs(n - 600) / 600)) > 0.5) {
      expect(foldWarning).toContain(`fold sizes run from ${Math.min(...folds)} to ${Math.max(...folds)} records against a target of 600 each`);
    } else expect(foldWarning).toBeUndefined();
    // The summary reports the sizes achieved; without --stratify, no class deviation.
    const summary = formatShuffleSummary(m, { width: 100, out, report: null, table: false });
    expect(summary[0]).toContain('whole groups of "site"');
    expect(summary[0]).not.toMatch(/deviation/);
    expect(summary[1]).toBe(`rowdeck: part sizes 0 to ${Math.max(...sizes).toLocaleString('en-US')} records (target 150 each); fold sizes ${Math.min(...folds)} to ${Math.max(...folds)} records (target 600 each): whole groups are dealt, so sizes follow them.`);
    // Correct all the same: every record once, each site whole.
    expect(m.output.records).toBe(1200);
    expect((await verify({ dir: out })).ok).toBe(true);
  });

  it('says nothing where the groups fill the parts evenly enough', async () => {
    const notices: string[] = [];
    const run = await runShuffle({ inputs: [input], out: join(dir, 'even-groups'), seed: 'g', partitions: 2, group: 'sensor', onNotice: (t) => notices.push(t) });
    expect(run.warnings).toEqual([]);
    expect(notices).toEqual([]);
  });
});

describe('--stratify COL:bins=Q', () => {
  it('cuts a numeric column at its quantiles and deals every bin evenly', async () => {
    const out = join(dir, 'bins');
    const m = await shuffle({ inputs: [input], out, seed: 'b', partitions: 3, stratify: 'reading:bins=4' });
    const values = parseCsv(inputText).rows.map((r) => Number(r[3])).sort((a, b) => a - b);
    // Edges at the 25/50/75 % order statistics, computed here independently.
    const expected = [1, 2, 3].map((k) => values[Math.floor((k * values.length) / 4)]);
    expect(m.strata.bins).toEqual([{ column: 'reading', bins: 4, edges: expected, exact: true, values: 6000, missing: 0 }]);
    expect(m.strata.values.map((v) => v.records)).toEqual([1500, 1500, 1500, 1500]);
    for (const p of m.output.parts) p.strata.forEach((n) => expect(Math.abs(n - 500)).toBeLessThan(1));
    // Each record's bin, recomputed from the file, matches the label's interval.
    expect(m.strata.values[0]!.value![0]).toBe(`01 [-inf, ${expected[0]})`);
  });

  it('names the line of a value that is not a number', async () => {
    const file = join(dir, 'nan.csv');
    writeFileSync(file, 'id,level\n1,3.5\n2,high\n');
    await expect(shuffle({ inputs: [file], out: join(dir, 'nan-out'), stratify: 'level:bins=2' })).rejects.toMatchObject({
      code: 'RDK_NOT_NUMERIC',
      message: expect.stringContaining('nan.csv:3'),
    });
  });
});

describe('class values that look alike', () => {
  it('counts values of one length that differ only in a late byte apart, in runs and interleaved', async () => {
    // Stage 1 first compares a value with the previous record's; these values share their
    // length and all but the last byte, so only a full comparison tells them apart.
    const values = ['zone-a1', 'zone-a2', 'zone-b1', 'zone-a1x'];
    const lines = ['id,zone,reading'];
    const expected = new Map<string, number>();
    let id = 0;
    const add = (v: string): void => {
      lines.push(`${id++},${v},${id % 7}`);
      expected.set(v, (expected.get(v) ?? 0) + 1);
    };
    for (const v of values) for (let k = 0; k < 50; k++) add(v); // runs, as in sorted inputs
    for (let k = 0; k < 400; k++) add(values[(k * 7) % 3]!); // interleaved
    const file = join(dir, 'zones.csv');
    writeFileSync(file, lines.join('\n') + '\n');
    const out = join(dir, 'zones');
    const m = await shuffle({ inputs: [file], out, seed: 'z', partitions: 4, stratify: 'zone' });
    const counted = new Map<string, number>();
    for (const p of m.output.parts) {
      const perPart = new Map<string, number>();
      for (const r of parseCsv(readPart(join(out, p.path))).rows) {
        counted.set(r[1]!, (counted.get(r[1]!) ?? 0) + 1);
        perPart.set(r[1]!, (perPart.get(r[1]!) ?? 0) + 1);
      }
      // The manifest's per-part class counts are what the part holds (csv-parse re-reads it).
      m.strata.values.forEach((s, j) => expect(p.strata[j]).toBe(perPart.get(s.value![0]!) ?? 0));
    }
    expect(counted).toEqual(expected);
    expect(Object.fromEntries(m.strata.values.map((s) => [s.value![0], s.records]))).toEqual(Object.fromEntries(expected));
  });
});

describe('quantile bins: the pieces of the first pass', () => {
  it('selectRanks gives the values Float64Array.prototype.sort() puts at those ranks (ties, zeros of both signs, sorted and reversed runs)', () => {
    const rng = seedrandom('ranks');
    const kinds = [
      (_i: number): number => rng() * 100 - 50,
      (_i: number): number => Math.floor(rng() * 5),
      (i: number): number => i,
      (i: number): number => -i,
      (_i: number): number => (rng() < 0.5 ? -0 : 0),
      (_i: number): number => [-0, 0, 1, -1, 1e-300, -1e-300][Math.floor(rng() * 6)]!,
      (i: number): number => (i % 2 ? i : -i) * 0.5,
    ];
    for (let t = 0; t < 2100; t++) {
      const n = 1 + Math.floor(rng() * (t % 10 === 0 ? 5000 : 200));
      const make = kinds[t % kinds.length]!;
      const v = Float64Array.from({ length: n }, (_, i) => make(i));
      const sorted = v.slice().sort();
      const ranks = Array.from({ length: 1 + Math.floor(rng() * 7) }, () => Math.floor(rng() * n));
      const got = selectRanks(v.slice(), ranks);
      // Object.is tells -0 from +0.
      ranks.forEach((r, i) => expect(Object.is(got[i], sorted[r]), `n ${n} rank ${r}: ${got[i]} vs ${sorted[r]}`).toBe(true));
    }
  });

  it('binValueAt reads a value as Number() reads its text, and refuses what is not a number the same way', () => {
    const values = ['12.5', '-3', '+4', '1e3', '.5', '5.', '0x1A', '0b11', 'Infinity', 'NaN', 'abc', ' 7 ', '', '\u00a08', '1_000', '٣'];
    const data = Buffer.from(values.join(''));
    const starts: number[] = [];
    let at = 0;
    for (const v of values) {
      starts.push(at);
      at += Buffer.byteLength(v);
    }
    const n = values.length;
    const b: RecordBatch = {
      data, count: n, wanted: 1,
      start: new Uint32Array(n), end: new Uint32Array(n), next: new Uint32Array(n), offset: new Float64Array(n), line: Float64Array.from(values, (_, i) => i + 2),
      fieldStart: Uint32Array.from(starts), fieldEnd: Uint32Array.from(values, (v, i) => starts[i]! + Buffer.byteLength(v)), fieldKind: new Uint8Array(n).fill(FieldKind.Plain),
    };
    values.forEach((text, i) => {
      // The reference: Number() of the decoded text, empty or blank as missing (common practice for CSV).
      const want = text.trim() === '' ? null : Number(text);
      if (want !== null && !Number.isFinite(want)) expect(() => binValueAt(b, i, 0, 'x', 'f.csv')).toThrow(new RegExp(`f\\.csv:${i + 2}`));
      else expect(binValueAt(b, i, 0, 'x', 'f.csv')).toBe(want);
    });
  });
});

