/**
 * Differential test: thousands of random CSV inputs, read in random chunk sizes (down to one
 * byte), must give the same records and field values as csv-parse (the reference parser), run
 * with the settings that match the reader's documented rules: LF or CRLF record ends (a bare CR
 * is data), completely empty lines skipped, UTF-8 BOM dropped.
 * Fixed seeds (seedrandom), so a failure is reproducible from the printed case number.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { parse } from 'csv-parse/sync';
import seedrandom from 'seedrandom';
import { readAll } from './reader.helpers.js';
import { useStructuralScan } from '../src/io/csv-records.js';

const ATOMS_PLAIN = ['a', 'b', 'z', '1', '7', ' ', 'é', '名', '🌡', '.', '-', '\r'];
const ATOMS_QUOTED = [...ATOMS_PLAIN, ',', ';', '\t', '|', '""', '\n', '\r\n', '\r', "'"];

function pick<T>(rng: () => number, xs: readonly T[]): T {
  return xs[Math.floor(rng() * xs.length)]!;
}

function makeField(rng: () => number, delim: string): string {
  // Mostly short fields, some long ones so the word-at-a-time scanning paths are exercised.
  const len = rng() < 0.25 ? Math.floor(rng() * 40) : Math.floor(rng() * rng() * 8);
  if (rng() < 0.35) {
    let s = '"';
    for (let i = 0; i < len; i++) s += pick(rng, ATOMS_QUOTED);
    return s + '"';
  }
  let s = '';
  for (let i = 0; i < len; i++) {
    const a = pick(rng, ATOMS_PLAIN);
    if (a !== delim) s += a;
  }
  return s;
}

function makeInput(rng: () => number): { text: string; delim: string } {
  const delim = pick(rng, [',', ',', ';', '\t', '|']);
  const cols = 1 + Math.floor(rng() * 5);
  const rows = Math.floor(rng() * 20);
  let text = rng() < 0.1 ? '\ufeff' : '';
  for (let r = 0; r <= rows; r++) {
    const fields: string[] = [];
    for (let c = 0; c < cols; c++) fields.push(makeField(rng, delim));
    text += fields.join(delim);
    if (r < rows || rng() < 0.5) text += rng() < 0.5 ? '\n' : '\r\n';
    if (rng() < 0.03) text += '\n';
  }
  return { text, delim };
}

/** Cuts at random points; chunk sizes from 1 byte up to the whole input. */
function randomCuts(rng: () => number, len: number): number[] {
  const mode = rng();
  const cuts: number[] = [];
  if (mode < 0.2) for (let p = 1; p < len; p++) cuts.push(p);
  else {
    const mean = 1 + Math.floor(rng() * 40);
    for (let p = 1 + Math.floor(rng() * mean); p < len; p += 1 + Math.floor(rng() * mean)) cuts.push(p);
  }
  return cuts;
}

function referenceParse(text: string, delim: string): string[][] | null {
  try {
    return parse(text, { delimiter: delim, record_delimiter: ['\r\n', '\n'], skip_empty_lines: true, bom: true, relax_column_count: false }) as string[][];
  } catch {
    return null;
  }
}

function ourParse(text: string, delim: string, cuts: number[]): { rows: string[][]; raw: Buffer[] } | null {
  try {
    // Read without a header so every record (first one included) comes back with all fields.
    const probe = referenceColumns(text, delim);
    const wanted = Array.from({ length: probe }, (_, i) => `column_${i + 1}`);
    const r = readAll(text, { header: false, delimiter: delim, format: delim === '\t' ? 'tsv' : 'csv', wanted }, cuts);
    return { rows: r.fields.map((f) => f.map((v) => v ?? '<missing>')), raw: r.raw };
  } catch (err) {
    if ((err as { code?: string }).code?.startsWith('RDK_')) return null;
    throw err;
  }
}

/** Field count of the first record as the reference sees it (to name the wanted columns). */
function referenceColumns(text: string, delim: string): number {
  const rows = referenceParse(text, delim);
  return rows?.[0]?.length ?? 0;
}

// Both CSV scans against the reference: the WebAssembly structural scan ('simd', used for data
// of 4 KiB and more) and the JavaScript byte scan ('js'), each forced onto every piece of data.
for (const scan of ['js', 'simd'] as const) {
  describe(`differential against csv-parse (${scan} scan)`, () => {
    beforeAll(() => useStructuralScan(scan));
    afterAll(() => useStructuralScan('auto'));

    it('valid random inputs: same records and field values, bytes preserved', () => {
      const rng = seedrandom('rowdeck-reader-differential-1');
      let compared = 0;
      for (let k = 0; k < 3000; k++) {
        const { text, delim } = makeInput(rng);
        const ref = referenceParse(text, delim);
        const cuts = randomCuts(rng, Buffer.byteLength(text));
        if (ref === null || ref.length === 0) continue; // an inconsistent field count, rare with these generators; covered below
        const ours = ourParse(text, delim, cuts);
        expect(ours, `case ${k}: ${JSON.stringify(text)}`).not.toBeNull();
        expect(ours!.rows, `case ${k}: ${JSON.stringify(text)} cuts ${cuts.join(',')}`).toEqual(ref);
        // Records are byte ranges: together with the skipped BOM and blank lines they are the input.
        const joined = Buffer.concat(ours!.raw).toString('utf8');
        expect(text.replace(/^\ufeff/, '').replace(/(^|\n)(\r?\n)+/g, '$1'), `case ${k}`).toBe(joined.replace(/(^|\n)(\r?\n)+/g, '$1'));
        compared++;
      }
      expect(compared).toBeGreaterThan(2500);
    });

    it('corrupted inputs (a stray quote or a dropped field): accepted and rejected alike', () => {
      const rng = seedrandom('rowdeck-reader-differential-2');
      let rejected = 0;
      let accepted = 0;
      for (let k = 0; k < 2000; k++) {
        const { text, delim } = makeInput(rng);
        const chars = [...text];
        const at = Math.floor(rng() * (chars.length + 1));
        if (rng() < 0.7) chars.splice(at, 0, '"');
        else chars.splice(at, 0, delim);
        const bad = chars.join('');
        const ref = referenceParse(bad, delim);
        const ours = ourParse(bad, delim, randomCuts(rng, Buffer.byteLength(bad)));
        if (ref === null || ref.length === 0) {
          if (ref === null) {
            expect(ours, `case ${k}: ${JSON.stringify(bad)}`).toBeNull();
            rejected++;
          }
        } else {
          expect(ours?.rows, `case ${k}: ${JSON.stringify(bad)}`).toEqual(ref);
          accepted++;
        }
      }
      expect(rejected).toBeGreaterThan(500);
      expect(accepted).toBeGreaterThan(100);
    });
  });
}

describe('JSON Lines against JSON.parse', () => {
  const KEYS = ['site', 'temp', 'fault', 'note', 'x"y', 'é'];
  function makeValue(rng: () => number, depth: number): unknown {
    const r = rng();
    if (r < 0.3) return Array.from({ length: Math.floor(rng() * 6) }, () => pick(rng, ['a', '"', '\\', '\n', 'é', '🌡', '}', ',', ' ', '\u0001'])).join('');
    if (r < 0.5) return Math.round((rng() - 0.5) * 1e6) / 100;
    if (r < 0.6) return null;
    if (r < 0.7) return rng() < 0.5;
    if (r < 0.85 && depth < 2) return Array.from({ length: Math.floor(rng() * 3) }, () => makeValue(rng, depth + 1));
    if (depth < 2) return Object.fromEntries(KEYS.slice(0, Math.floor(rng() * 3)).map((k) => [k, makeValue(rng, depth + 1)]));
    return 'leaf';
  }
  it('wanted top-level values equal the parsed ones, in random chunkings', () => {
    const rng = seedrandom('rowdeck-reader-differential-jsonl');
    for (let k = 0; k < 400; k++) {
      const objs: Record<string, unknown>[] = [];
      let text = '';
      const rows = 1 + Math.floor(rng() * 10);
      for (let r = 0; r < rows; r++) {
        const o: Record<string, unknown> = {};
        for (const key of KEYS) if (rng() < 0.7) o[key] = makeValue(rng, 0);
        if (r === 0) for (const key of KEYS) o[key] ??= 1; // the first object names every column
        objs.push(o);
        let line = JSON.stringify(o);
        if (rng() < 0.3) line = line.replaceAll(/([{,])"/g, '$1 "'); // spaces JSON allows (may touch strings: then it must still parse the same)
        text += line + (rng() < 0.5 ? '\n' : '\r\n');
      }
      const expected = text.split(/\r?\n/).filter((l) => l !== '').map((l) => JSON.parse(l) as Record<string, unknown>);
      const r = readAll(text, { format: 'jsonl', wanted: KEYS, file: 'x.jsonl' }, randomCuts(rng, Buffer.byteLength(text)));
      expect(r.fields.length).toBe(expected.length);
      r.fields.forEach((f, i) => {
        KEYS.forEach((key, w) => {
          const want = expected[i]![key];
          const got = f[w];
          if (want === undefined || want === null) expect(got, `case ${k} row ${i} ${key}`).toBeNull();
          else if (typeof want === 'string') expect(got).toBe(want);
          else expect(JSON.parse(got!)).toEqual(want);
        });
      });
    }
  });
});
