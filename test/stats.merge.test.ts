import { describe, expect, it } from 'vitest';
import seedrandom from 'seedrandom';
import { FieldKind } from '../src/io/batch.js';
import type { RecordBatch } from '../src/io/batch.js';
import { TableStats } from '../src/core/stats.js';
import type { SerializedStats } from '../src/core/stats.js';
import { buildCsvTable, computeTableStats, shuffleInPlace } from './stats.helpers.js';
import type { BuiltTable } from './stats.helpers.js';

// Invented data: a fleet of field sensors logging readings with a fault class.
function makeSensorTable(seed: string, count: number): BuiltTable {
  const rng = seedrandom(seed);
  const faults = ['none', 'drift', 'stuck', 'spike', 'dropout'];
  const rows: (string | null)[][] = [];
  for (let i = 0; i < count; i++) {
    const day = 1 + Math.floor(rng() * 28);
    const hour = Math.floor(rng() * 24);
    rows.push([
      `unit-${String(Math.floor(rng() * 40)).padStart(3, '0')}`,
      `2031-07-${String(day).padStart(2, '0')}T${String(hour).padStart(2, '0')}:15:00Z`,
      rng() < 0.05 ? null : (rng() * 90 - 20).toFixed(Math.floor(rng() * 4)),
      String(Math.floor(rng() * 5000) - 100),
      rng() < 0.5 ? 'true' : 'False',
      rng() < 0.1 ? 'field "check", see log' : rng() < 0.3 ? 'réglage ±0.5' : null,
      i === count - 7 ? 'n/a' : String(i % 13),
      faults[Math.floor(rng() ** 2 * faults.length)]!,
    ]);
  }
  const columns = ['unit', 'logged_at', 'temp_c', 'pulse', 'battery_ok', 'note', 'code', 'fault'];
  return buildCsvTable(columns, rows, (r, c) => (r * 7 + c) % 5 === 0);
}

/** Splits record ids into k random (not contiguous) groups, then merges their stats in random order. */
function computeMergedStats(t: BuiltTable, rng: () => number, k: number, opts?: { distinctCap?: number }): TableStats {
  const ids = shuffleInPlace(t.fields.map((_, i) => i), rng);
  const groups: number[][] = Array.from({ length: k }, () => []);
  for (const id of ids) groups[Math.floor(rng() ** 1.5 * k)]!.push(id); // uneven sizes, some empty
  const pieces = groups.map((g) => computeTableStats(t, opts, g.sort((a, b) => a - b)));
  shuffleInPlace(pieces, rng);
  // Random binary merge tree, each result sent through JSON as between threads: every other merge
  // takes the other table in its serialised form (mergeSerialized, as the read-back of --stats
  // does), and every other result goes over in table order (toTransfer) instead of sorted.
  for (let round = 0; pieces.length > 1; round++) {
    const a = pieces.splice(Math.floor(rng() * pieces.length), 1)[0]!;
    const b = pieces.splice(Math.floor(rng() * pieces.length), 1)[0]!;
    if (round % 2 === 0) a.merge(b);
    else a.mergeSerialized(JSON.parse(JSON.stringify(b.toTransfer())) as SerializedStats);
    const sent = round % 4 < 2 ? a.toJSON() : a.toTransfer();
    pieces.push(TableStats.fromJSON(JSON.parse(JSON.stringify(sent)) as SerializedStats));
  }
  return pieces[0]!;
}

describe('merging is exact and order-independent', () => {
  const table = makeSensorTable('fleet-a', 3000);

  it('random splits merged in random orders equal the whole, bit for bit', () => {
    const whole = computeTableStats(table);
    const wholeJson = JSON.stringify(whole.summary());
    const rng = seedrandom('merge-orders');
    for (let trial = 0; trial < 12; trial++) {
      const merged = computeMergedStats(table, rng, 2 + Math.floor(rng() * 12));
      expect(merged.toJSON()).toEqual(whole.toJSON());
      expect(JSON.stringify(merged.summary())).toBe(wholeJson);
    }
  });

  it('also across the distinct cap: exact pieces and estimated pieces merge to the whole', () => {
    // cap 30: unit (40 values) and temp_c exceed it, fault/code/battery_ok stay exact
    const whole = computeTableStats(table, { distinctCap: 30 });
    const s = whole.summary();
    expect(s.find((c) => c.name === 'unit')!.approximate).toBe(true);
    expect(s.find((c) => c.name === 'fault')!.approximate).toBe(false);
    const rng = seedrandom('merge-cap');
    for (let trial = 0; trial < 8; trial++) {
      const merged = computeMergedStats(table, rng, 2 + Math.floor(rng() * 20), { distinctCap: 30 });
      expect(merged.toJSON()).toEqual(whole.toJSON());
      expect(merged.summary()).toEqual(s);
    }
  });

  it('summary reports what the table holds (sanity against a direct count)', () => {
    const s = computeTableStats(table).summary();
    const col = (n: string) => s.find((c) => c.name === n)!;
    expect(col('unit').type).toBe('text');
    expect(col('logged_at').type).toBe('datetime');
    expect(col('temp_c').type).toBe('number');
    expect(col('pulse').type).toBe('integer');
    expect(col('battery_ok').type).toBe('boolean');
    expect(col('code').type).toBe('text'); // one 'n/a' among integers
    // temp_c: compare with a direct two-pass computation on the same values (Number() parse).
    const temps = table.fields
      .map((f) => table.data.toString('utf8', f[2]!.start, f[2]!.end).replace(/"/g, ''))
      .filter((v) => v !== '')
      .map(Number);
    const mean = temps.reduce((a, x) => a + x, 0) / temps.length;
    const v = temps.reduce((a, x) => a + (x - mean) ** 2, 0) / (temps.length - 1);
    expect(col('temp_c').count).toBe(temps.length);
    expect(col('temp_c').missing).toBe(3000 - temps.length);
    expect(col('temp_c').mean!).toBeCloseTo(mean, 10);
    expect(col('temp_c').sd!).toBeCloseTo(Math.sqrt(v), 10);
    expect(col('temp_c').min).toBe(Math.min(...temps));
    expect(col('temp_c').max).toBe(Math.max(...temps));
    const notes = col('note');
    expect(notes.top!.map((t) => t.value).sort()).toEqual(['field "check", see log', 'réglage ±0.5']);
  });
});

/** Stats of one column holding the given CSV field texts (null = empty field). */
function summarizeValues(values: (string | null)[], opts?: { distinctCap?: number; topValues?: number }) {
  const t = buildCsvTable(['v'], values.map((v) => [v]));
  return computeTableStats(t, opts).summary()[0]!;
}

describe('type inference and widening', () => {
  it.each([
    { values: ['1', '2', '-3', '+4', '007'], type: 'integer' },
    { values: ['1', '2.5'], type: 'number' },
    { values: ['1e3', '.5', '1.', '-2.5E-3'], type: 'number' },
    { values: ['9007199254740993'], type: 'number' }, // beyond 2^53: not an exact integer
    { values: ['9007199254740991'], type: 'integer' }, // 2^53 - 1
    { values: ['1', 'x'], type: 'text' },
    { values: ['true', 'FALSE', 'True'], type: 'boolean' },
    { values: ['1', 'true'], type: 'text' },
    { values: ['2031-07-04', '2031-07-04T09:30', '2031-07-04 09:30:15.250+02:00', '2031-07-04T09:30:15Z'], type: 'datetime' },
    { values: ['2031-07-04', '12'], type: 'text' },
    { values: ['2031-02-29'], type: 'text' }, // not a leap year (Gregorian rule)
    { values: ['2032-02-29'], type: 'datetime' },
    { values: ['2031-13-01'], type: 'text' },
    { values: ['2031-07-04T24:00'], type: 'text' },
    { values: ['NaN'], type: 'text' },
    { values: ['Infinity', '-Infinity'], type: 'text' },
    { values: ['1e400'], type: 'text' }, // overflows a double
    { values: ['0x10'], type: 'text' },
    { values: [' 1'], type: 'text' }, // spaces are part of a field (RFC 4180 section 2 rule 4)
    { values: [null, null], type: 'empty' },
  ])('$values -> $type', ({ values, type }) => {
    expect(summarizeValues(values).type).toBe(type);
  });

  it('parses decimals exactly as Number() does (ECMA-262 string-to-number as the reference)', () => {
    const rng = seedrandom('decimal-parse');
    const texts: string[] = [];
    for (let i = 0; i < 3000; i++) {
      const intDigits = Math.floor(rng() * 12);
      const fracDigits = Math.floor(rng() * 12);
      let s = rng() < 0.3 ? '-' : '';
      for (let d = 0; d < intDigits; d++) s += Math.floor(rng() * 10);
      if (fracDigits > 0 || intDigits === 0) s += '.' + Array.from({ length: Math.max(1, fracDigits) }, () => Math.floor(rng() * 10)).join('');
      if (rng() < 0.1) s += 'e' + (Math.floor(rng() * 40) - 20);
      texts.push(s);
    }
    for (const s of texts) {
      const c = summarizeValues([s]);
      expect(Object.is(c.min, Number(s) + 0), s).toBe(true);
      expect(Object.is(c.mean, Number(s) + 0), s).toBe(true);
    }
  });

  it('numeric min/max compare as numbers, datetime/text min/max as text', () => {
    const n = summarizeValues(['10', '9', '-2.5', '100']);
    expect([n.min, n.max]).toEqual([-2.5, 100]);
    const d = summarizeValues(['2031-07-04T10:00Z', '2029-01-01', '2031-07-04T09:00Z']);
    expect([d.min, d.max]).toEqual(['2029-01-01', '2031-07-04T10:00Z']);
    const t = summarizeValues(['b', 'B', 'a', 'é']);
    expect([t.min, t.max]).toEqual(['B', 'é']);
  });

  it('values too large for exact squares keep min/max but give no moments', () => {
    const c = summarizeValues(['1e300', '2', '3']);
    expect(c.type).toBe('number');
    expect(c.max).toBe(1e300);
    expect(c.mean).toBeNull();
    expect(c.sd).toBeNull();
  });
});

describe('missing values', () => {
  it('counts empty fields, quoted empty fields, absent JSON fields and JSON empty strings', () => {
    const pieces: [string, FieldKind][] = [
      ['12', FieldKind.Plain],
      ['""', FieldKind.CsvQuoted], // quoted empty -> missing
      ['x', FieldKind.Plain],
      ['"a""b"', FieldKind.CsvQuoted], // -> a"b (RFC 4180 section 2 rule 7)
      ['"caf\\u00e9"', FieldKind.JsonString], // -> café (JSON escape, RFC 8259 section 7)
      ['""', FieldKind.JsonString], // JSON empty string -> missing
      ['', FieldKind.Plain], // empty field -> missing
      ['', FieldKind.Missing], // absent JSON field -> missing
    ];
    const data = Buffer.from(pieces.map((p) => p[0]).join('|'), 'utf8');
    const stats = new TableStats(['v']);
    let pos = 0;
    for (const [text, kind] of pieces) {
      stats.addField(0, data, pos, pos + Buffer.byteLength(text), kind);
      stats.addRecordDone();
      pos += Buffer.byteLength(text) + 1;
    }
    const c = stats.summary()[0]!;
    expect(stats.records).toBe(8);
    expect(c.missing).toBe(4);
    expect(c.count).toBe(4);
    expect(c.count + c.missing).toBe(stats.records);
    expect(c.type).toBe('text');
    expect(c.top!.map((t) => t.value)).toEqual(['12', 'a"b', 'café', 'x']);
  });

  it('a JSON string and the same CSV text count as one value', () => {
    const csv = new TableStats(['v']);
    const cb = Buffer.from('café', 'utf8');
    csv.addField(0, cb, 0, cb.length, FieldKind.Plain);
    const json = new TableStats(['v']);
    const jb = Buffer.from('"caf\\u00e9"');
    json.addField(0, jb, 0, jb.length, FieldKind.JsonString);
    csv.merge(json);
    expect(csv.summary()[0]!.top).toEqual([{ value: 'café', count: 2 }]);
  });
});

describe('distinct values', () => {
  it('stays exact up to the cap and switches to an estimate beyond it', () => {
    const ten = Array.from({ length: 10 }, (_, i) => `s${i}`);
    const atCap = summarizeValues(ten, { distinctCap: 10 });
    expect(atCap.approximate).toBe(false);
    expect(atCap.distinct).toBe(10);
    expect(atCap.top).not.toBeNull();
    const over = summarizeValues([...ten, 's10'], { distinctCap: 10 });
    expect(over.approximate).toBe(true);
    expect(over.top).toBeNull();
    expect(over.distinct).toBe(11); // small-range estimate (linear counting) is exact-ish here
  });

  it('estimates large distinct counts within 5 % (HyperLogLog, 4096 registers: std error ~1.6 %)', () => {
    for (const n of [5000, 20000, 100000]) {
      const values = Array.from({ length: n }, (_, i) => `sensor-${i * 7919}`);
      const c = summarizeValues(values);
      expect(c.approximate).toBe(true);
      expect(Math.abs(c.distinct - n) / n, `n=${n} got ${c.distinct}`).toBeLessThan(0.05);
    }
  });

  it('repeats do not move the estimate (it counts distinct values, not records)', () => {
    const values = Array.from({ length: 3000 }, (_, i) => `v${i % 1500}`);
    const once = summarizeValues(values.slice(0, 1500), { distinctCap: 100 });
    const twice = summarizeValues(values, { distinctCap: 100 });
    expect(twice.distinct).toBe(once.distinct);
  });

  it('top values equal a full sort of every value (many ties at the cut, non-ASCII values)', () => {
    // Reference: count with a Map, sort all entries by count descending, then by String order
    // (UTF-16 code units, ECMA-262 IsLessThan), take the first k.
    const rng = seedrandom('top-ties');
    const alphabet = ['a', 'b', 'Z', 'é', '€', '\u{1D11E}', '\uFF21', '0'];
    for (let trial = 0; trial < 30; trial++) {
      const n = 1 + Math.floor(rng() * 400);
      const values = Array.from({ length: n }, () => {
        const len = 1 + Math.floor(rng() * 3);
        let v = '';
        for (let q = 0; q < len; q++) v += alphabet[Math.floor(rng() * alphabet.length)]!;
        return v;
      });
      const k = 1 + Math.floor(rng() * 12);
      const counts = new Map<string, number>();
      for (const v of values) counts.set(v, (counts.get(v) ?? 0) + 1);
      const expected = [...counts]
        .sort((x, y) => y[1] - x[1] || (x[0] < y[0] ? -1 : x[0] > y[0] ? 1 : 0))
        .slice(0, k)
        .map(([value, count]) => ({ value, count }));
      expect(summarizeValues(values, { topValues: k }).top).toEqual(expected);
    }
  });

  it('top values: count descending, ties by value in code-unit order, at most topValues', () => {
    const c = summarizeValues(['b', 'a', 'c', 'b', 'a', 'd', 'Z', 'e'], { topValues: 3 });
    expect(c.top).toEqual([
      { value: 'a', count: 2 },
      { value: 'b', count: 2 },
      { value: 'Z', count: 1 },
    ]);
  });
});

describe('exclude-values mode', () => {
  it('leaves no data value in the output, keeps counts and numeric moments', () => {
    const secrets = ['unit-Xq7', 'unit-Wz4', 'unit-Pr9'];
    const rows = [
      [secrets[0]!, '2031-07-04T09:30:00Z', '412.375', 'OVERHEAT'],
      [secrets[1]!, '2031-08-14T11:45:00Z', '-38.0625', 'none'],
      [secrets[2]!, '2031-09-24T23:59:00Z', '97.5', 'none'],
      [secrets[0]!, '2031-10-01T00:00:00Z', '1003.25', 'LEAK'],
    ];
    const t = buildCsvTable(['unit', 'logged_at', 'reading', 'fault'], rows);
    const stats = computeTableStats(t);
    const open = JSON.stringify(stats.summary());
    const closed = JSON.stringify(stats.summary({ excludeValues: true }));
    const allValues = rows.flat();
    // Test of the test: the normal summary does contain some of them.
    expect(allValues.some((v) => open.includes(v))).toBe(true);
    for (const v of allValues) expect(closed.includes(v), v).toBe(false);
    expect(closed).not.toContain('2031');
    const s = stats.summary({ excludeValues: true });
    const reading = s.find((c) => c.name === 'reading')!;
    expect(reading.mean).toBe((412.375 - 38.0625 + 97.5 + 1003.25) / 4); // exact in binary
    expect(reading.sd).not.toBeNull();
    expect(reading.min).toBeNull();
    expect(s.find((c) => c.name === 'fault')!).toMatchObject({ count: 4, distinct: 3, top: null, min: null, max: null });
  });

  it('drops moments of numeric columns with fewer than 3 values (they would reveal them)', () => {
    const t = buildCsvTable(['reading'], [['12.5'], ['17.25']]);
    const c = computeTableStats(t).summary({ excludeValues: true })[0]!;
    expect(c.mean).toBeNull();
    expect(c.sd).toBeNull();
  });
});

describe('serialised form', () => {
  it('is canonical JSON data: equal content gives equal JSON whatever the insertion order', () => {
    const t = makeSensorTable('fleet-b', 400);
    const ids = t.fields.map((_, i) => i);
    const a = computeTableStats(t, undefined, ids);
    const b = computeTableStats(t, undefined, shuffleInPlace(ids.slice(), seedrandom('ser')));
    expect(JSON.stringify(a.toJSON())).toBe(JSON.stringify(b.toJSON()));
    const back = TableStats.fromJSON(JSON.parse(JSON.stringify(a)) as SerializedStats);
    expect(back.summary()).toEqual(a.summary());
    // The form for other threads keeps the table's order, so it differs; what it holds does not.
    expect(JSON.stringify(a.toTransfer())).not.toBe(JSON.stringify(b.toTransfer()));
    expect(TableStats.fromJSON(JSON.parse(JSON.stringify(b.toTransfer())) as SerializedStats).toJSON()).toEqual(a.toJSON());
  });

  it('summary keys come in one fixed order, for every column type', () => {
    const t = makeSensorTable('fleet-c', 50);
    const keys = ['name', 'type', 'count', 'missing', 'distinct', 'approximate', 'min', 'max', 'mean', 'sd', 'top'];
    for (const c of computeTableStats(t).summary()) expect(Object.keys(c)).toEqual(keys);
    for (const c of computeTableStats(t).summary({ excludeValues: true })) expect(Object.keys(c)).toEqual(keys);
  });

  it('addBatch reads the wanted fields of a record batch like addField does', () => {
    const t = makeSensorTable('fleet-d', 60);
    const W = t.columns.length;
    const n = t.fields.length;
    const batch: RecordBatch = {
      data: t.data,
      count: n,
      start: new Uint32Array(n),
      end: new Uint32Array(n),
      next: new Uint32Array(n),
      offset: new Float64Array(n),
      line: new Float64Array(n),
      wanted: W,
      fieldStart: Uint32Array.from(t.fields.flatMap((r) => r.map((f) => f.start))),
      fieldEnd: Uint32Array.from(t.fields.flatMap((r) => r.map((f) => f.end))),
      fieldKind: Uint8Array.from(t.fields.flatMap((r) => r.map((f) => f.kind))),
    };
    const viaBatch = new TableStats(t.columns);
    viaBatch.addBatch(batch);
    expect(viaBatch.records).toBe(n);
    expect(viaBatch.toJSON()).toEqual(computeTableStats(t).toJSON());
  });

  it('refuses to merge tables with different columns', () => {
    expect(() => new TableStats(['a']).merge(new TableStats(['b']))).toThrow(/different columns/);
  });
});
