/**
 * The fast paths of the column statistics give the same figures as the slow ones: values read as
 * words or byte by byte, counted in the value table or estimated, compared by 8-byte prefix or in
 * full, and numbers summed as decimals. References: Buffer.compare for byte order (the order
 * RFC 3629 notes UTF-8 shares with code points), ECMA-262 Number() for parsing, exact BigInt sums.
 */
import { describe, expect, it } from 'vitest';
import seedrandom from 'seedrandom';
import { FieldKind } from '../src/io/batch.js';
import { TableStats, type SerializedStats } from '../src/core/stats.js';
import { buildCsvTable, computeTableStats, shuffleInPlace } from './stats.helpers.js';

/** Feeds each value from its own exactly-sized Buffer (no bytes after it: the byte-by-byte path). */
function feedTight(values: Buffer[], opts?: { distinctCap?: number }): TableStats {
  const t = new TableStats(['v'], opts);
  for (const v of values) {
    if (v.length === 0) t.addField(0, v, 0, 0, FieldKind.Plain);
    else t.addField(0, Buffer.from(v), 0, v.length, FieldKind.Plain);
    t.addRecordDone();
  }
  return t;
}

/** Feeds the values from one large buffer with room after each (the whole-word path), as one batch. */
function feedBatch(values: Buffer[], opts?: { distinctCap?: number }): TableStats {
  const parts: Buffer[] = [];
  const start = new Uint32Array(values.length);
  const end = new Uint32Array(values.length);
  let pos = 0;
  values.forEach((v, i) => {
    start[i] = pos;
    end[i] = pos + v.length;
    parts.push(v, Buffer.from('\n####'));
    pos += v.length + 5;
  });
  const n = values.length;
  const t = new TableStats(['v'], opts);
  t.addBatch({
    data: Buffer.concat(parts),
    count: n,
    start,
    end,
    next: end,
    offset: new Float64Array(n),
    line: new Float64Array(n),
    wanted: 1,
    fieldStart: start,
    fieldEnd: end,
    fieldKind: new Uint8Array(n),
  });
  return t;
}

/** Random byte strings over an alphabet that makes long shared prefixes, NULs and high bytes likely. */
function makeByteValues(seed: string, count: number): Buffer[] {
  const rng = seedrandom(seed);
  const alphabet = [0x00, 0x20, 0x30, 0x31, 0x61, 0x62, 0x7f, 0x80, 0xc3, 0xff];
  const prefixes = [Buffer.from('2031-07-04T'), Buffer.from('sensor-'), Buffer.alloc(0), Buffer.from([0x61, 0x00])];
  return Array.from({ length: count }, () => {
    const head = prefixes[Math.floor(rng() * prefixes.length)]!;
    const tail = Buffer.from(Array.from({ length: Math.floor(rng() * 14) }, () => alphabet[Math.floor(rng() * alphabet.length)]!));
    return Buffer.concat([head, tail]);
  });
}

describe('word and byte paths agree', () => {
  it('the same values give identical serialised state (sketch registers included) either way', () => {
    const values = makeByteValues('paths', 3000);
    for (const cap of [0, 50, 100000]) {
      const tight = feedTight(values, { distinctCap: cap });
      const batch = feedBatch(values, { distinctCap: cap });
      expect(batch.toJSON()).toEqual(tight.toJSON());
    }
  });

  it('counts long values that share their first 12 bytes exactly', () => {
    const values: Buffer[] = [];
    const expected = new Map<string, number>();
    for (let i = 0; i < 2000; i++) {
      const v = `2031-07-04T09:${String(i % 60).padStart(2, '0')}:${String((i * 7) % 60).padStart(2, '0')}Z`;
      values.push(Buffer.from(v));
      expected.set(v, (expected.get(v) ?? 0) + 1);
    }
    const s = feedBatch(values, { distinctCap: 5000 }).summary()[0]!;
    expect(s.distinct).toBe(expected.size);
    const top = [...expected].sort((a, b) => b[1] - a[1] || (a[0] < b[0] ? -1 : 1)).slice(0, 10);
    expect(s.top!.map((t) => [t.value, t.count])).toEqual(top);
  });
});

describe('text min/max by 8-byte prefix keys', () => {
  it('equal Buffer.compare order, in exact and in estimated mode, whatever the input order', () => {
    const rng = seedrandom('bounds');
    for (let trial = 0; trial < 20; trial++) {
      const values = makeByteValues(`bounds-${trial}`, 300).filter((v) => v.length > 0);
      const sorted = values.slice().sort(Buffer.compare);
      for (const cap of [0, 1000]) {
        const t = feedBatch(shuffleInPlace(values.slice(), rng), { distinctCap: cap });
        const { lo, hi } = t.bounds(0);
        expect(lo!.equals(sorted[0]!)).toBe(true);
        expect(hi!.equals(sorted[sorted.length - 1]!)).toBe(true);
      }
    }
  });

  it('orders a value before its own extensions and NUL after its end', () => {
    for (const cap of [0, 1000]) {
      const vals = ['abc', 'abcd', 'ab', 'abc\u0000', 'abcdefgh', 'abcdefghi', 'abcdefgh\u0000'].map((v) => Buffer.from(v, 'latin1'));
      const { lo, hi } = feedTight(vals, { distinctCap: cap }).bounds(0);
      expect([lo!.toString('latin1'), hi!.toString('latin1')]).toEqual(['ab', 'abcdefghi']);
    }
  });
});

describe('numbers are summed at their decimal value', () => {
  // NIST StRD NumAcc4 (https://www.itl.nist.gov/div898/strd/univ/numacc4.html): certified mean 10000000.2 and sd 0.1. Summing the nearest
  // doubles exactly leaves sd = 0.10000000055890503 (the residual is from decimal-to-binary
  // parsing); summing the decimals exactly gives 0.1 to the last bit.
  it('NumAcc4 through the table: sd 0.1 and mean 10000000.2, exactly rounded', () => {
    const values = ['10000000.2'];
    for (let i = 0; i < 500; i++) values.push('10000000.1', '10000000.3');
    const c = computeTableStats(buildCsvTable(['y'], values.map((v) => [v]))).summary()[0]!;
    expect(c.count).toBe(1001);
    expect(c.mean).toBe(10000000.2);
    expect(c.sd).toBe(0.1);
  });

  it('exponents, signs and leading zeros: the same decimal whatever its spelling', () => {
    const spellings = ['1.5e-3', '0.0015', '15E-4', '+0.00150', '150e-5', '.0015'];
    const c = computeTableStats(buildCsvTable(['v'], spellings.map((v) => [v]))).summary()[0]!;
    expect(c.type).toBe('number');
    expect(c.mean).toBe(0.0015);
    expect(c.sd).toBe(0);
    expect(c.distinct).toBe(6); // distinct counts the texts
  });

  it('long decimals (more than 15 digits) are summed at their double value, exactly', () => {
    const values = ['0.30000000000000004441', '0.1000000000000000055511151231257827', '12345678901234567890'];
    const c = computeTableStats(buildCsvTable(['v'], values.map((v) => [v]))).summary()[0]!;
    const xs = values.map(Number);
    expect(c.min).toBe(Math.min(...xs));
    expect(c.max).toBe(Math.max(...xs));
    // Mean of three doubles: their exact sum divided by 3, rounded once; with these magnitudes the
    // two small ones vanish against the large one in any order.
    expect(c.mean).toBe(xs[2]! / 3);
  });

  it('a column decided as text drops its numeric figures the same way in any order', () => {
    const rng = seedrandom('collapse');
    const rows = ['1', '2.5', '-3', 'n/a', '4e2', 'true', '2031-07-04', '7'].map((v) => [v]);
    const ref = JSON.stringify(computeTableStats(buildCsvTable(['v'], rows), { distinctCap: 0 }).toJSON());
    for (let trial = 0; trial < 20; trial++) {
      const t = buildCsvTable(['v'], shuffleInPlace(rows.slice(), rng));
      const ids = t.fields.map((_, i) => i);
      const cut = Math.floor(rng() * ids.length);
      const a = computeTableStats(t, { distinctCap: 0 }, ids.slice(0, cut));
      const b = computeTableStats(t, { distinctCap: 0 }, ids.slice(cut));
      a.merge(TableStats.fromJSON(JSON.parse(JSON.stringify(b.toJSON())) as SerializedStats));
      expect(JSON.stringify(a.toJSON())).toBe(ref);
    }
    const col = JSON.parse(ref).stats[0];
    expect(col.kinds).toEqual([0, 0, 0, 0, 8]);
    expect(col.numMin).toBeNull();
  });
});
