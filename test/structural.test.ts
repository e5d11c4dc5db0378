/**
 * The WebAssembly structural scan (src/io/structural.ts): its masks are right on inputs worked
 * out by hand, and the reader gives exactly the same records, lines, fields and refusals with it
 * as with the JavaScript byte scan, on large random inputs that cross many 64-byte turns. (reader.differential.test.ts runs both scans against csv-parse.)
 */
import { afterAll, describe, expect, it } from 'vitest';
import seedrandom from 'seedrandom';
import { setWalkLimit, structuralScanner } from '../src/io/structural.js';
import { useStructuralScan } from '../src/io/csv-records.js';
import { readAll } from './reader.helpers.js';

afterAll(() => useStructuralScan('auto'));

/** Positions of the set bits of one mask kind (0 delimiters, 1 LFs outside quotes, 2 LFs inside). */
function bits(kind: number, len: number): number[] {
  const sc = structuralScanner()!;
  const out: number[] = [];
  for (let p = 0; p < len; p++) {
    const word = sc.masks[sc.maskAt + (p >>> 6) * 6 + kind * 2 + ((p >>> 5) & 1)]!;
    if ((word >>> (p & 31)) & 1) out.push(p);
  }
  return out;
}

describe('masks and checks, worked out by hand', () => {
  const scanner = structuralScanner();

  it('is available on this Node', () => {
    expect(scanner).not.toBeNull();
  });

  it('finds delimiters and line ends outside quotes, and line ends inside them', () => {
    // a , " b , c LF " , d LF " x " " y " , z LF: bytes 0 to 19
    const text = 'a,"b,c\n",d\n"x""y",z\n';
    const d = Buffer.from(text);
    expect(scanner!.scan(d, 0, d.length, 0x2c)).toBe(d.length);
    expect(bits(0, d.length)).toEqual([1, 8, 17]);
    expect(bits(1, d.length)).toEqual([10, 19]);
    expect(bits(2, d.length)).toEqual([6]);
  });

  it('carries the inside-quotes state across 64-byte turns', () => {
    const long = 'q'.repeat(150);
    const text = `1,"${long},\n${long}"\n2,x\n`;
    const d = Buffer.from(text);
    expect(scanner!.scan(d, 0, d.length, 0x2c)).toBe(d.length);
    const close = text.indexOf('"\n');
    expect(bits(0, d.length)).toEqual([1, close + 3]);
    expect(bits(1, d.length)).toEqual([close + 1, d.length - 1]);
    expect(bits(2, d.length)).toEqual([text.indexOf(',\n') + 1]);
  });

  it('stops at the first quote that is not plain RFC 4180 quoting', () => {
    const stop = (text: string) => scanner!.scan(Buffer.from(text), 0, Buffer.byteLength(text), 0x2c);
    expect(stop('a,b"c\n')).toBe(3); // a quote inside an unquoted field
    expect(stop('a,"b"c\n')).toBe(4); // text after a closing quote
    expect(stop('a,"b"\rc\n')).toBe(4); // a closing quote, then CR without LF
    expect(stop('a,"b"\r\nc,"d"\n')).toBe(13); // CR LF after a closing quote is fine
    expect(stop('"a""b",""\n')).toBe(10); // doubled quotes and an empty quoted field
    expect(stop(`${'x,'.repeat(40)}"y"z\n`)).toBe(82); // found in a later turn
    // A closing quote as the very last byte: what follows is unknown, so the scan stops there.
    expect(stop('a,"b"')).toBe(4);
  });

  it('scans from a record start in the middle of the data, with the delimiter given', () => {
    const d = Buffer.from('skip\tme\nx\t"y\ty"\n');
    expect(scanner!.scan(d, 8, d.length, 0x09)).toBe(d.length - 8);
    expect(bits(0, d.length - 8)).toEqual([1]);
    expect(bits(1, d.length - 8)).toEqual([7]);
  });
});

/** Random CSV: plain and quoted fields (delimiters, quotes, LF, CR LF, bare CR inside), with faults sprinkled in. */
function randomCsv(rng: () => number, records: number, delim: string, faults: number): string {
  const atoms = ['a', 'b', '7', '-', ' ', 'é', '名', '🌡', '\r'];
  const quotedAtoms = [...atoms, delim, '""', '\n', '\r\n'];
  // A clean first record: it sets the field count.
  const lines: string[] = [['h1', 'h2', 'h3', 'h4'].join(delim) + '\n'];
  for (let r = 0; r < records; r++) {
    const fields: string[] = [];
    for (let f = 0; f < 4; f++) {
      const n = Math.floor(rng() * (rng() < 0.1 ? 90 : 8));
      if (rng() < 0.3) {
        let v = '';
        for (let i = 0; i < n; i++) v += quotedAtoms[Math.floor(rng() * quotedAtoms.length)];
        fields.push(`"${v}"`);
      } else {
        let v = '';
        for (let i = 0; i < n; i++) v += atoms[Math.floor(rng() * atoms.length)];
        fields.push(v);
      }
    }
    let line = fields.join(delim);
    if (rng() < faults) {
      const at = Math.floor(rng() * (line.length + 1));
      line = line.slice(0, at) + (rng() < 0.7 ? '"' : delim) + line.slice(at);
    }
    lines.push(line + (rng() < 0.2 ? '\r\n' : '\n'));
    if (rng() < 0.02) lines.push('\n');
  }
  return lines.join('');
}

describe('the reader gives the same results with either scan', () => {
  function read(text: string, delim: string, cuts: number[], scan: 'js' | 'simd') {
    useStructuralScan(scan);
    const r = readAll(text, { header: false, delimiter: delim, format: delim === '\t' ? 'tsv' : 'csv', wanted: ['column_1', 'column_4'], onBadRecord: 'skip' }, cuts);
    return { fields: r.fields, lines: r.lines, offsets: r.offsets, rejected: r.rejected.map((x) => [x.line, x.code, x.reason]) };
  }

  it('on clean and faulty random inputs, in random pieces, with comma, tab and semicolon', () => {
    const rng = seedrandom('rowdeck-structural-1');
    let records = 0;
    let rejected = 0;
    for (let k = 0; k < 60; k++) {
      const delim = [',', '\t', ';'][k % 3]!;
      const text = randomCsv(rng, 50 + Math.floor(rng() * 400), delim, k % 2 === 0 ? 0 : 0.03);
      const len = Buffer.byteLength(text);
      const cuts = Array.from({ length: Math.floor(rng() * 4) }, () => Math.floor(rng() * len));
      const js = read(text, delim, cuts, 'js');
      const simd = read(text, delim, cuts, 'simd');
      expect(simd, `case ${k}`).toEqual(js);
      records += js.fields.length;
      rejected += js.rejected.length;
    }
    // The inputs did exercise both kinds of record.
    expect(records).toBeGreaterThan(10000);
    expect(rejected).toBeGreaterThan(100);
  });

  it('whatever columns are wanted, and however few records one walk of the masks writes', () => {
    // The module's walk writes at most a set number of records a call, then goes on where it
    // stopped; a refused record stops it too. Small limits cross both often.
    const rng = seedrandom('rowdeck-structural-3');
    const wantedSets = [[], ['column_1'], ['column_4'], ['column_2', 'column_3'], ['column_4', 'column_1', 'column_3', 'column_2']];
    const readWith = (text: string, wanted: string[], cuts: number[], scan: 'js' | 'simd') => {
      useStructuralScan(scan);
      const r = readAll(text, { header: false, wanted, onBadRecord: 'skip' }, cuts);
      return { records: r.records, raw: r.raw.map((b) => b.toString()), fields: r.fields, lines: r.lines, offsets: r.offsets, rejected: r.rejected.map((x) => [x.line, x.code]) };
    };
    let compared = 0;
    try {
      for (const limit of [2, 6, 4096]) {
        setWalkLimit(limit);
        for (const wanted of wantedSets) {
          const text = randomCsv(rng, 200, ',', 0.02);
          const cuts = [Math.floor(rng() * text.length)];
          const js = readWith(text, wanted, cuts, 'js');
          expect(readWith(text, wanted, cuts, 'simd'), `limit ${limit}, wanted ${wanted.join(',')}`).toEqual(js);
          compared += js.raw.length;
        }
      }
    } finally {
      setWalkLimit(4096);
    }
    expect(compared).toBeGreaterThan(2500);
  });

  it('when the data is scanned in windows (records across a window end are walked)', () => {
    const rng = seedrandom('rowdeck-structural-2');
    for (const window of [64, 100, 1000, 4096]) {
      const text = randomCsv(rng, 300, ',', 0.01);
      const js = read(text, ',', [], 'js');
      useStructuralScan('simd', window);
      const r = readAll(text, { header: false, delimiter: ',', wanted: ['column_1', 'column_4'], onBadRecord: 'skip' }, []);
      const simd = { fields: r.fields, lines: r.lines, offsets: r.offsets, rejected: r.rejected.map((x) => [x.line, x.code, x.reason]) };
      expect(simd, `window ${window}`).toEqual(js);
    }
  });
});
