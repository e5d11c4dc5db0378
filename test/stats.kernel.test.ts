/**
 * The statistics module (src/core/stats.wat, driven by src/core/stats-kernel.ts) gives exactly the
 * figures of the JavaScript path: on random values of every kind the classifier knows (numbers
 * at every scale and length, ISO dates valid and not, booleans, text with shared prefixes, long
 * values), in every field form (plain, CSV quoted with and without "", JSON strings with and
 * without escapes, missing), with garbage bytes after each field, at several distinct caps, read
 * back mid-stream, and merged across tables. The reference is the JavaScript path itself, which
 * test/stats.nist.test.ts, stats.iris.test.ts and stats.paths.test.ts check against published
 * values and exact BigInt arithmetic.
 */
import { afterEach, describe, expect, it, vi } from 'vitest';
import seedrandom from 'seedrandom';
import { FieldKind, type RecordBatch } from '../src/io/batch.js';
import { TableStats } from '../src/core/stats.js';
import { BOUND_CAP, MAX_COLUMNS, StatsKernel, useStatsKernel } from '../src/core/stats-kernel.js';

// The module's own tests run whatever ROWDECK_STATS says (test/wasm.test.ts checks the switch);
// where the module does not run, they fail rather than skip.
useStatsKernel(true);
const available = StatsKernel.create(1) !== null;

type Rng = () => number;

const pick = <T>(rng: Rng, xs: readonly T[]): T => xs[Math.floor(rng() * xs.length)]!;
const digits = (rng: Rng, n: number): string => Array.from({ length: n }, () => String(Math.floor(rng() * 10))).join('');

/** A value the classifier has to think about: the kinds, their edges, and near misses. */
function makeValue(rng: Rng): string {
  const r = rng();
  if (r < 0.3) {
    // Numbers: 1..20 integer digits, 0..8 fraction digits, signs, leading zeros, exponents.
    const sign = pick(rng, ['', '', '-', '+']);
    const int = rng() < 0.1 ? '' : (rng() < 0.1 ? '000' : '') + digits(rng, 1 + Math.floor(rng() * (rng() < 0.9 ? 6 : 20)));
    const frac = rng() < 0.5 ? '' : '.' + digits(rng, Math.floor(rng() * 9));
    const exp = rng() < 0.15 ? pick(rng, ['e', 'E']) + pick(rng, ['', '+', '-']) + digits(rng, Math.floor(rng() * 4)) : '';
    return sign + int + frac + exp || '0';
  }
  if (r < 0.45) {
    // ISO dates and date-times, some invalid (month 13, February 29 of a common year, bad offsets).
    const year = pick(rng, ['2023', '2024', '1900', '2000', '0000']);
    const month = pick(rng, ['01', '02', '12', '13', '00', '1a']);
    const day = pick(rng, ['01', '28', '29', '30', '31', '32']);
    let v = `${year}-${month}-${day}`;
    if (rng() < 0.7) {
      v += pick(rng, ['T', 't', ' ', 'X']) + pick(rng, ['00', '23', '24']) + ':' + pick(rng, ['00', '59', '60']);
      if (rng() < 0.7) v += ':' + pick(rng, ['00', '59', '60', '61', '5']);
      if (rng() < 0.3) v += pick(rng, ['.', ',']) + digits(rng, Math.floor(rng() * 4));
      v += pick(rng, ['', 'Z', 'z', '+05:30', '-0800', '+05', '+24:00', '+05:60', 'Zz', '+']);
    }
    return v;
  }
  if (r < 0.52) return pick(rng, ['true', 'TRUE', 'False', 'false', 'tru', 'falsey', 't', 'f']);
  if (r < 0.55) return 'x'.repeat(BOUND_CAP - 2 + Math.floor(rng() * 5)) + digits(rng, 2);
  // Text: shared prefixes (the bounds' 8-byte keys tie), quotes, backslashes, non-ASCII.
  const head = pick(rng, ['', 'sensor-', 'sensor-0', '2023-04-', '-', 'Süd ', '"', 'a\\b']);
  const alphabet = ['a', 'b', 'z', '0', '9', ' ', '"', ',', 'é', '\u00ff', '\\', '\n'];
  return head + Array.from({ length: Math.floor(rng() * 14) }, () => pick(rng, alphabet)).join('');
}

/** Values at the classifier's edges (ISO 8601 calendar rules, ECMA-262 numeric literals, as stats.ts reads them). */
const EDGES = [
  // Leap years: divisible by 4, except centuries not divisible by 400 (Gregorian calendar).
  '2000-02-29', '1900-02-29', '2024-02-29', '2023-02-29', '2023-02-28', '0000-02-29', '2400-02-29', '2100-02-29',
  '2023-04-31', '2023-04-30', '2023-00-10', '2023-1-01', '2023-01-01x',
  '2023-12-31T23:59:60Z', '2023-12-31T23:59:61Z', '2023-12-31T24:00', '2023-12-31T23:60', '2023-01-01 00:00', '2023-01-01t00:00z',
  '2023-01-01T00:00+05:30', '2023-01-01T00:00-0800', '2023-01-01T00:00+05', '2023-01-01T00:00+05:3', '2023-01-01T00:00+0530x',
  '2023-01-01T00:00:00.123Z', '2023-01-01T00:00:00,5', '2023-01-01T00:00:00.', '2023-01-01T00:00:5', '2023-01-01T00:00+24:00',
  '2023-01-01T00:00+23:59', '2023-01-01T00:00+05:60', '2023-01-01T00:00Z ', '2023-01-01T00:00;00',
  // Numbers: 15 and 16 significant digits, scales 0..22 and past them, exponents, signs, forms.
  '123456789012345', '1234567890123456', '000000000000000123456789012345', '0.000000000000000000001', '0.0000000000000000000001',
  '0.00000000000000000000001', '1e-22', '1e-23', '1.5e22', '12e13', '12e14', '123456789012345e0', '1e15', '1e16',
  '-0', '+0.0', '-0.0e0', '.5', '5.', '-.5e1', '1e+5', '1E5', '0e0', '00001', '1e100000', '1e400', '1e-400', '1e', '1e+',
  '--1', '1.2.3', '1,5', '.', '-', '+', '.e1', '9007199254740993', '-9007199254740993', '4.35', '0.1', '0.2', '0.3',
  'true', 'TRUE', 'tRuE', 'false', 'False', 'FALSE ', 'tru', 'falsee', 't', 'f', 'fals', 'truE',
];

interface Field {
  bytes: Buffer;
  kind: FieldKind;
}

/** The value as one of the field forms a reader produces, chosen at random where more than one fits. */
function asField(rng: Rng, v: string | null): Field {
  if (v === null) return rng() < 0.5 ? { bytes: Buffer.alloc(0), kind: FieldKind.Plain } : { bytes: Buffer.alloc(0), kind: FieldKind.Missing };
  const r = rng();
  if (r < 0.4 && !/["\\,\n]/.test(v)) return { bytes: Buffer.from(v), kind: FieldKind.Plain };
  if (r < 0.75) return { bytes: Buffer.from(`"${v.replace(/"/g, '""')}"`), kind: FieldKind.CsvQuoted };
  // JSON: sometimes a needless escape (\u0041 for A) so the string has a backslash.
  const json = JSON.stringify(v);
  return { bytes: Buffer.from(rng() < 0.2 ? json.replace(/A|a/, (c) => `\\u00${c.charCodeAt(0).toString(16)}`) : json), kind: FieldKind.JsonString };
}

/**
 * Records of W random fields as batches of up to `perBatch`, each field followed by garbage bytes.
 * Field `fewAt` repeats a few values; the others vary.
 */
function makeBatches(seed: string, records: number, W: number, perBatch: number, fewAt = 0): RecordBatch[] {
  const rng = seedrandom(seed);
  const batches: RecordBatch[] = [];
  for (let r0 = 0; r0 < records; r0 += perBatch) {
    const n = Math.min(perBatch, records - r0);
    // The batch's bytes start after some unrelated ones, as a reader's buffer does.
    const parts: Buffer[] = [Buffer.from('#'.repeat(1 + Math.floor(rng() * 7)))];
    let pos = parts[0]!.length;
    const start = new Uint32Array(n);
    const end = new Uint32Array(n);
    const fieldStart = new Uint32Array(n * W);
    const fieldEnd = new Uint32Array(n * W);
    const fieldKind = new Uint8Array(n * W);
    for (let i = 0; i < n; i++) {
      start[i] = pos;
      for (let f = 0; f < W; f++) {
        // Column fewAt repeats few values (stays below small caps); the others vary.
        const v = rng() < 0.1 ? null : f === fewAt ? pick(rng, ['1', '2.5', 'x', '2024-02-29']) : makeValue(rng);
        const field = asField(rng, v);
        const k = i * W + f;
        if (field.kind === FieldKind.Missing) {
          fieldStart[k] = 0;
          fieldEnd[k] = 0;
        } else {
          fieldStart[k] = pos;
          fieldEnd[k] = pos + field.bytes.length;
        }
        fieldKind[k] = field.kind;
        // Bytes after a value that a careless word read would pick up: digits, quotes, 0xff.
        const junk = Buffer.from([pick(rng, [0x31, 0x22, 0xff, 0x2c]), 0x39, 0x22, 0xff, 0x30, 0x2e, 0x35]);
        parts.push(field.bytes, junk.subarray(0, 1 + Math.floor(rng() * 7)));
        pos += field.bytes.length + parts[parts.length - 1]!.length;
      }
      end[i] = pos;
    }
    batches.push(batchOf({ data: Buffer.concat(parts), fieldStart, fieldEnd, fieldKind }, n, W, start, end));
  }
  return batches;
}

/** Fields one after another, `after` following each: the bytes, and each field's range and kind. */
function layOut(fields: Field[], after: Buffer): { data: Buffer; fieldStart: Uint32Array; fieldEnd: Uint32Array; fieldKind: Uint8Array } {
  const fieldStart = new Uint32Array(fields.length);
  const fieldEnd = new Uint32Array(fields.length);
  let pos = 0;
  fields.forEach((f, i) => {
    fieldStart[i] = pos;
    fieldEnd[i] = pos + f.bytes.length;
    pos += f.bytes.length + after.length;
  });
  const data = Buffer.concat(fields.flatMap((f) => [f.bytes, after]));
  return { data, fieldStart, fieldEnd, fieldKind: Uint8Array.from(fields.map((f) => f.kind)) };
}

/** A batch of `count` records of W fields (record i's range is start[i], end[i]; by default all the bytes). */
function batchOf(
  f: { data: Buffer; fieldStart: Uint32Array; fieldEnd: Uint32Array; fieldKind: Uint8Array },
  count: number,
  W: number,
  start = new Uint32Array(count),
  end = new Uint32Array(count).fill(f.data.length),
): RecordBatch {
  return { data: f.data, count, start, end, next: end, offset: new Float64Array(count), line: new Float64Array(count), wanted: W, fieldStart: f.fieldStart, fieldEnd: f.fieldEnd, fieldKind: f.fieldKind };
}

/** One column's values as a batch, in random field forms, 8 garbage bytes after each. */
function columnBatch(rng: Rng, values: string[]): RecordBatch {
  return batchOf(layOut(values.map((v) => asField(rng, v)), Buffer.from('12345678')), values.length, 1);
}

const COLUMNS = ['few', 'a', 'b', 'c'];

function tableOf(batches: RecordBatch[], kernel: boolean, distinctCap: number): TableStats {
  useStatsKernel(kernel);
  const t = new TableStats(COLUMNS, { distinctCap });
  for (const b of batches) t.addBatch(b);
  return t;
}

afterEach(() => {
  useStatsKernel(true);
  vi.restoreAllMocks();
});

describe('the statistics module gives the figures of the JavaScript path', () => {
  it('runs on this Node', () => {
    expect(available).toBe(true);
  });

  it.each([
    ['seed 1, cap 0', 's1', 0],
    ['seed 2, cap 3', 's2', 3],
    ['seed 3, cap 50', 's3', 50],
    ['seed 4, cap 1000', 's4', 1000],
  ])('%s: serialised state and summary', (_name, seed, cap) => {
    const batches = makeBatches(seed, 6000, COLUMNS.length, 700);
    const run = vi.spyOn(StatsKernel.prototype, 'run');
    const withModule = tableOf(batches, true, cap);
    // The module did the work (a cap of 1000 keeps the repeating column exact, not the others).
    expect(run).toHaveBeenCalled();
    const plain = tableOf(batches, false, cap);
    expect(withModule.toJSON()).toEqual(plain.toJSON());
    expect(withModule.summary()).toEqual(plain.summary());
  });

  it('each value alone: the same kind, value, decimal sums and bounds (the classifier, value by value)', () => {
    // In a mixed column the first text value makes the type text and classifying stops, so here
    // each value has a column of its own (250 columns, cap 0).
    const rng = seedrandom('one by one');
    const W = 250;
    const names = Array.from({ length: W }, (_, i) => `c${i}`);
    for (let round = 0; round < 17; round++) {
      // The edges first (padded with random values), then random values.
      const values = Array.from({ length: W }, (_, i) => (round === 0 && i < EDGES.length ? EDGES[i]! : makeValue(rng)));
      const one = layOut(values.map((v) => asField(rng, v)), Buffer.from('9"\xff'));
      // One record, fed twice: the first time each column's exact table takes the value (and
      // passes the cap), the second time the module, so both classify it.
      const batch = batchOf(one, 1, W);
      const figures = (kernel: boolean): unknown => {
        useStatsKernel(kernel);
        const t = new TableStats(names, { distinctCap: 0 });
        t.addBatch(batch);
        t.addBatch(batch);
        return t.toJSON();
      };
      expect(figures(true)).toEqual(figures(false));
    }
  });

  it('numbers only: the exact decimal sums, minimum and maximum (no text to void them)', () => {
    const rng = seedrandom('numbers');
    const values = Array.from({ length: 20000 }, () => {
      const v = (rng() < 0.5 ? '-' : '') + digits(rng, 1 + Math.floor(rng() * 15));
      const cut = Math.floor(rng() * v.length);
      return rng() < 0.7 && cut > 1 ? `${v.slice(0, cut)}.${v.slice(cut)}` : v;
    });
    const n = values.length;
    const batch = batchOf(layOut(values.map((v) => ({ bytes: Buffer.from(v), kind: FieldKind.Plain })), Buffer.from('\n')), n, 1);
    const figures = (kernel: boolean): unknown => {
      useStatsKernel(kernel);
      const t = new TableStats(['x'], { distinctCap: 0 });
      t.addBatch(batch);
      t.addBatch(batch); // the module takes a column from the batch after the one that passes the cap
      return t.toJSON();
    };
    const a = figures(true) as { stats: { numMin: number; decimals: { n: number } }[] };
    expect(a.stats[0]!.decimals.n).toBe(2 * n);
    expect(a).toEqual(figures(false));
  });

  it('below the cap: keys that differ only in bytes 9-12, keys past 12 bytes, then the cap passed mid-batch', () => {
    const rng = seedrandom('exact');
    const keys = ['sensor-0001', 'sensor-0002', 'sensor-00011', 'sensor-00012', 'sensor-000111', 'ab', 'a', '', 'true', '7', '7.0', '"q"'];
    const late = Array.from({ length: 40 }, (_, i) => `late-${i}`);
    const values = Array.from({ length: 9000 }, (_, i) => (i > 6000 && rng() < 0.05 ? pick(rng, late) : pick(rng, keys)));
    const batch = columnBatch(rng, values);
    for (const cap of [12, 30, 1000]) {
      const figures = (kernel: boolean): unknown => {
        useStatsKernel(kernel);
        const t = new TableStats(['k'], { distinctCap: cap });
        t.addBatch(batch);
        t.addBatch(batch);
        return t.toJSON();
      };
      expect(figures(true)).toEqual(figures(false));
    }
  });

  it('batches and single fields on one table (as inputs with other column orders give): the same figures', () => {
    // A column with few values for a while (the module counts it), that passes the cap while
    // records come one at a time.
    const rng = seedrandom('mixed');
    const batches = [0, 1, 2, 3].map((j) =>
      columnBatch(rng, Array.from({ length: 3000 }, (_, i) => (j === 3 && i > 1000 ? `new-${i}` : `k${Math.floor(rng() * 20)}`))),
    );
    const feed = (kernel: boolean): unknown => {
      useStatsKernel(kernel);
      const t = new TableStats(['k'], { distinctCap: 40 });
      batches.forEach((b, j) => {
        if (j < 3) t.addBatch(b);
        else for (let i = 0; i < b.count; i++) t.addRecord(b, i);
      });
      return t.toJSON();
    };
    expect(feed(true)).toEqual(feed(false));
  });

  it('a column the module counted for a batch, then not (its values stopped repeating), passing the cap: the same figures', () => {
    const rng = seedrandom('tabled, then not');
    const few = (): string => `k${Math.floor(rng() * 20)}`;
    const batches = [
      columnBatch(rng, Array.from({ length: 1100 }, few)),
      columnBatch(rng, Array.from({ length: 3000 }, (_, i) => (i % 15 === 0 || i > 2600 ? `b-${i}` : few()))),
      columnBatch(rng, Array.from({ length: 1500 }, (_, i) => `c-${i}`)),
    ];
    const feed = (kernel: boolean): unknown => {
      useStatsKernel(kernel);
      const t = new TableStats(['k'], { distinctCap: 1000 });
      for (const b of batches) t.addBatch(b);
      return t.toJSON();
    };
    expect(feed(true)).toEqual(feed(false));
  });

  it(`a table of more than ${MAX_COLUMNS} columns stays in JavaScript (slots are 8 KiB a column)`, () => {
    const W = MAX_COLUMNS + 1;
    const names = Array.from({ length: W }, (_, i) => `c${i}`);
    const n = 3000;
    // Every field of every record is the same 4 bytes.
    const batch = batchOf({ data: Buffer.from('12.5,'), fieldStart: new Uint32Array(n * W), fieldEnd: new Uint32Array(n * W).fill(4), fieldKind: new Uint8Array(n * W) }, n, W);
    const run = vi.spyOn(StatsKernel.prototype, 'run');
    const exact = vi.spyOn(StatsKernel.prototype, 'runExact');
    useStatsKernel(true);
    const t = new TableStats(names, { distinctCap: 0 });
    t.addBatch(batch);
    t.addBatch(batch);
    expect(run).not.toHaveBeenCalled();
    expect(exact).not.toHaveBeenCalled();
    expect(t.summary()[W - 1]).toMatchObject({ type: 'number', count: 2 * n, min: 12.5, max: 12.5, mean: 12.5 });
  });

  it('read mid-stream, then more values: the same as one pass in JavaScript', () => {
    const batches = makeBatches('mid', 4000, COLUMNS.length, 500);
    useStatsKernel(true);
    const t = new TableStats(COLUMNS, { distinctCap: 2 });
    batches.forEach((b, i) => {
      t.addBatch(b);
      if (i % 3 === 1) t.toJSON(); // merges the module's slots into the columns
    });
    expect(t.toJSON()).toEqual(tableOf(batches, false, 2).toJSON());
  });

  it('an instance given back by one table and taken by the next (parts read back in turn): the same figures', () => {
    // Each table's values differ, and the first leaves exact tables and passed-cap slots behind.
    const first = makeBatches('release-a', 3000, COLUMNS.length, 300);
    const second = makeBatches('release-b', 3000, COLUMNS.length, 300);
    useStatsKernel(true);
    const create = vi.spyOn(StatsKernel, 'create');
    const a = tableOf(first, true, 40);
    const before = a.toJSON();
    a.releaseKernel();
    const run = vi.spyOn(StatsKernel.prototype, 'run');
    const b = tableOf(second, true, 40);
    // The second table ran in the module, on the instance the first gave back...
    expect(run).toHaveBeenCalled();
    expect(create).toHaveBeenCalledTimes(2);
    // ...and its figures are its own values' alone.
    expect(b.toJSON()).toEqual(tableOf(second, false, 40).toJSON());
    // The first table keeps its figures, and goes on in JavaScript.
    expect(a.toJSON()).toEqual(before);
    first.forEach((x) => a.addBatch(x));
    expect(a.toJSON()).toEqual(tableOf([...first, ...first], false, 40).toJSON());
  });

  it('tables merged (as threads do) equal one table in JavaScript, in either order', () => {
    const batches = makeBatches('merge', 5000, COLUMNS.length, 400);
    const half = Math.floor(batches.length / 2);
    const a = tableOf(batches.slice(0, half), true, 10);
    const b = tableOf(batches.slice(half), true, 10);
    const c = tableOf(batches.slice(0, half), true, 10);
    const d = tableOf(batches.slice(half), true, 10);
    a.merge(b);
    d.merge(c);
    const reference = tableOf(batches, false, 10).toJSON();
    expect(a.toJSON()).toEqual(reference);
    expect(d.toJSON()).toEqual(reference);
  });

  it('a table of some of the columns, fed from where they sit in the batch, holds what a table of all holds for them', () => {
    // A profile thread that keeps a share of a wide input's columns (see columnShare in
    // src/engine/profile.ts) gives its table the whole batch and the field its first column is.
    // The repeating field is not the first of a share, so the module's exact tables, its
    // estimates and the JavaScript path each read fields at an offset from their columns.
    const names = ['p', 'q', 'r', 's', 't', 'u'];
    const batches = makeBatches('shares', 5000, names.length, 600, 3);
    for (const cap of [3, 1000]) {
      for (const kernel of [true, false]) {
        useStatsKernel(kernel);
        const runExact = vi.spyOn(StatsKernel.prototype, 'runExact');
        const all = new TableStats(names, { distinctCap: cap });
        for (const b of batches) all.addBatch(b);
        const whole = all.toJSON();
        for (const [from, to] of [[0, 2], [2, 5], [5, 6], [1, 6]] as const) {
          const share = new TableStats(names.slice(from, to), { distinctCap: cap });
          for (const b of batches) share.addBatch(b, from);
          const got = share.toJSON();
          expect(got.records).toBe(whole.records);
          expect(got.stats).toEqual(whole.stats.slice(from, to));
          expect(share.summary()).toEqual(all.summary().slice(from, to));
        }
        // With the module and a cap above the repeating field's few values, it was counted there.
        if (kernel && cap === 1000) expect(runExact).toHaveBeenCalled();
        runExact.mockRestore();
      }
    }
  });

  it('a table that recycles a used one (parts read back in turn) gives the figures of a fresh table', () => {
    const before = makeBatches('recycle-a', 3000, COLUMNS.length, 500);
    const after = makeBatches('recycle-b', 2500, COLUMNS.length, 400);
    for (const cap of [3, 40, 1000]) {
      for (const kernel of [true, false]) {
        useStatsKernel(kernel);
        const used = tableOf(before, kernel, cap);
        // The used table's columns: some past the cap (no value table to give), some below it.
        const t = new TableStats(COLUMNS, { distinctCap: cap }, used);
        for (const b of after) t.addBatch(b);
        const fresh = tableOf(after, kernel, cap);
        expect(t.toJSON()).toEqual(fresh.toJSON());
        expect(t.summary()).toEqual(fresh.summary());
        // Recycled again, by a table given the first batches: their figures, not a mix.
        const again = new TableStats(COLUMNS, { distinctCap: cap }, t);
        for (const b of before) again.addBatch(b);
        expect(again.toJSON()).toEqual(tableOf(before, false, cap).toJSON());
      }
    }
  });
});
