/**
 * core/strata.ts, the one place stratum keys and names come from, and that shuffle, profile and
 * verify name a class alike.
 *
 * Fields are read by the project's own reader from CSV written by RFC 4180's rules (a quoted
 * field may hold the delimiter, line breaks, and quotes written twice) and from JSON Lines with
 * RFC 8259 string escapes, so the keys are those of real batches.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { orderStrata } from '../src/core/balance.js';
import { deriveSecret } from '../src/core/hash.js';
import type { RecordBatch } from '../src/core/record-batch.js';
import {
  compareStratumKeys,
  describeStratum,
  fieldKey,
  keyBytes,
  keyOfValues,
  keyOrderIndex,
  MISSING_KEY,
  stratumKey,
  stratumLabel,
  stratumValues,
  TUPLE_SEP,
  tupleKey,
} from '../src/core/strata.js';
import { RecordReader, type RecordReaderOptions } from '../src/io/reader.js';
import { profile, RowdeckError, shuffle, verify } from '../src/index.js';
import { DEFAULT_SEED } from '../src/options.js';
import { makeTempDir, removeDir } from './helpers/engine.js';

/** Every batch of `text`, read with the given wanted columns (copies: a batch lives until the next push). */
function read(text: string | Buffer, o: Partial<RecordReaderOptions> & { wanted: string[] }): RecordBatch[] {
  const r = new RecordReader({ format: 'csv', header: true, file: 't', onBadRecord: 'fail', ...o });
  const out: RecordBatch[] = [];
  const keep = (b: RecordBatch | null): void => {
    if (b) out.push({ ...b, data: Buffer.from(b.data), fieldStart: b.fieldStart.slice(), fieldEnd: b.fieldEnd.slice(), fieldKind: b.fieldKind.slice() });
  };
  keep(r.push(Buffer.isBuffer(text) ? text : Buffer.from(text, 'utf8')));
  keep(r.end());
  return out;
}

/** The key of each record's field w, with whether keyBytes took it and the key its bytes make. */
function keysOf(batches: RecordBatch[], w = 0): { key: string; fast: boolean; bytesKey: string | null }[] {
  const range = { start: 0, end: 0 };
  return batches.flatMap((b) =>
    Array.from({ length: b.count }, (_, i) => {
      const fast = keyBytes(b, i, w, range);
      return { key: fieldKey(b, i, w), fast, bytesKey: fast ? b.data.toString('latin1', range.start, range.end) : null };
    }),
  );
}

const latin1 = (s: string): string => Buffer.from(s, 'utf8').toString('latin1');

describe('stratum keys', () => {
  it('a CSV field: its decoded UTF-8 bytes as latin1; "" inside quotes is one quote (RFC 4180); empty is missing', () => {
    const csv = 'id,c\n1,plain\n2,"quoted"\n3,"with ""quotes"""\n4,"a,b"\n5,"two\nlines"\n6,\n7,""\n8,Süd\n9,"Süd"\n';
    const keys = keysOf(read(csv, { wanted: ['c'] }));
    expect(keys.map((k) => k.key)).toEqual(['plain', 'quoted', 'with "quotes"', 'a,b', 'two\nlines', MISSING_KEY, '', latin1('Süd'), latin1('Süd')]);
  });

  it('a JSON Lines field: a string by its decoded value, a number or boolean by its text, null and absent as missing', () => {
    const jsonl = ['{"c":"plain"}', '{"c":"esc\\u0061ped \\"q\\""}', '{"c":12.50}', '{"c":true}', '{"c":null}', '{"d":1}', '{"c":"Süd"}', '{"c":""}'].join('\n') + '\n';
    const keys = keysOf(read(jsonl, { format: 'jsonl', header: false, wanted: ['c'] }));
    expect(keys.map((k) => k.key)).toEqual(['plain', 'escaped "q"', '12.50', 'true', MISSING_KEY, MISSING_KEY, latin1('Süd'), '']);
  });

  it('the byte-level fast path: where keyBytes takes a field, its bytes are exactly fieldKey; it takes plain fields and quoted printable ASCII', () => {
    const long = 'x'.repeat(65);
    const csv = `id,c\n1,plain\n2,"quoted"\n3,"with ""q"""\n4,"a,b"\n5,Süd\n6,"Süd"\n7,\n8,""\n9,${long}\n10,"tab\there"\n11,"back\\slash"\n`;
    const jsonl = ['{"c":"plain"}', '{"c":"esc\\u0061"}', '{"c":7}', '{"c":null}', '{"c":"Süd"}', '{"c":"back\\\\slash"}'].join('\n') + '\n';
    const csvKeys = keysOf(read(csv, { wanted: ['c'] }));
    const jsonKeys = keysOf(read(jsonl, { format: 'jsonl', header: false, wanted: ['c'] }));
    for (const k of [...csvKeys, ...jsonKeys]) if (k.fast) expect(k.bytesKey).toBe(k.key);
    // Which fields take the fast path (the rest are looked up by their key, with the same result).
    expect(csvKeys.map((k) => k.fast)).toEqual([true, true, false, true, true, false, false, false, false, false, false]);
    expect(jsonKeys.map((k) => k.fast)).toEqual([true, false, true, false, false, false]);
  });

  it('a record key joins the columns; a binned column is named by its bin; an absent column is missing', () => {
    const [b] = read('id,c,x\n1,a,3\n2,,12\n3,"b",\n', { wanted: ['c', 'x'] });
    const columns = [
      { name: 'c', edges: null },
      { name: 'x', edges: [5, 10] },
    ];
    const keys = [0, 1, 2].map((i) => stratumKey(b!, i, [0, 1], columns, 't'));
    expect(keys).toEqual([`a${TUPLE_SEP}01 [-inf, 5)`, `${MISSING_KEY}${TUPLE_SEP}03 [10, +inf)`, `b${TUPLE_SEP}${MISSING_KEY}`]);
    expect(stratumKey(b!, 0, [-1, 1], columns, 't')).toBe(`${MISSING_KEY}${TUPLE_SEP}01 [-inf, 5)`);
    expect(tupleKey(b!, 0, 0, 2)).toBe(`a${TUPLE_SEP}3`);
    // A bin value that is not a number names the file and line.
    const [bad] = read('id,x\n1,twelve\n', { wanted: ['x'] });
    expect(() => stratumKey(bad!, 0, [0], [{ name: 'x', edges: [5] }], 'in.csv')).toThrow(/^in\.csv:2: column "x" holds "twelve"/);
  });

  it('values and keys convert both ways, invalid UTF-8 included (lossless)', () => {
    const bytes = Buffer.from([0x61, 0xff, 0x62]);
    const keys = ['a', `a${TUPLE_SEP}${MISSING_KEY}`, latin1('Süd'), bytes.toString('latin1'), `${bytes.toString('latin1')}${TUPLE_SEP}x`];
    for (const k of keys) expect(keyOfValues(stratumValues(k))).toBe(k);
    expect(stratumValues(`a${TUPLE_SEP}${MISSING_KEY}`)).toEqual(['a', null]);
    expect(stratumValues(latin1('Süd'))).toEqual(['Süd']);
    // Two different invalid values stay two values.
    expect(stratumValues(Buffer.from([0xff]).toString('latin1'))).not.toEqual(stratumValues(Buffer.from([0xfe]).toString('latin1')));
  });

  it('strata are listed in key order, and a key knows its place there', () => {
    const keys = ['b', 'a', MISSING_KEY, 'a' + TUPLE_SEP + 'z'];
    expect([...keys].sort(compareStratumKeys)).toEqual(['a', 'a' + TUPLE_SEP + 'z', 'b', MISSING_KEY]);
    expect(keys.map((_, i) => keyOrderIndex(keys, i))).toEqual([2, 0, 3, 1]);
  });
});

describe('names of a stratum', () => {
  it('the description every message uses', () => {
    expect(describeStratum(['fault'], ['drift'], 0)).toBe('fault="drift"');
    expect(describeStratum(['fault', 'site'], ['drift', null], 0)).toBe('fault="drift", site=(missing)');
    expect(describeStratum(['fault'], ['say "hi"'], 0)).toBe('fault="say \\"hi\\""');
    expect(describeStratum(['fault'], null, 2)).toBe('stratum #3');
    expect(describeStratum([], [], 0)).toBe('all records');
  });

  it('the label tables and charts show', () => {
    expect(stratumLabel(['drift', null], 0)).toBe('drift · (missing)');
    expect(stratumLabel(null, 2)).toBe('class 3');
    expect(stratumLabel([], 0)).toBe('all records');
  });
});

describe('shuffle, profile and verify name a class alike', () => {
  let dir: string;
  let rare = '';
  let rarePlace = -1;

  beforeAll(() => {
    dir = makeTempDir('rowdeck-strata-');
    // A rare class whose place in the dealing order (seeded) differs from its place in key order,
    // so a message that counted in dealing order would name another class.
    const secret = deriveSecret(DEFAULT_SEED);
    for (let n = 0; n < 100 && rare === ''; n++) {
      const keys = ['common-a', 'common-b', `rare-${n}`];
      if (orderStrata(keys, secret).indexOf(2) !== 2) rare = keys[2]!;
    }
    rarePlace = 2;
    const rows = ['id,fault'];
    for (let i = 0; i < 40; i++) rows.push(`${i},${i % 2 ? 'common-a' : 'common-b'}`);
    rows.push(`40,${rare}`, `41,${rare}`);
    writeFileSync(join(dir, 'in.csv'), rows.join('\n') + '\n');
  });
  afterAll(() => removeDir(dir));

  it('the test data has a rare class out of key order when dealt', () => {
    expect(rare).not.toBe('');
  });

  it('with values withheld: "stratum #N", N its place in key order, in shuffle\'s error, profile\'s warning and verify\'s mismatch', async () => {
    const input = join(dir, 'in.csv');
    const failed = await shuffle({ inputs: [input], out: join(dir, 'never'), stratify: 'fault', partitions: 4, tolerance: 0.1, excludeValues: true }).catch((e: unknown) => e);
    expect(failed).toBeInstanceOf(RowdeckError);
    expect((failed as RowdeckError).code).toBe('RDK_TOLERANCE');
    expect((failed as RowdeckError).message).toMatch(new RegExp(`^Cannot keep class stratum #${rarePlace + 1} \\(2 of 42 records\\)`));

    const p = await profile({ inputs: [input], stratify: 'fault', partitions: 4, tolerance: 0.1, excludeValues: true });
    const unmet = p.warnings.find((w) => w.code === 'TOLERANCE_UNMET');
    expect(unmet?.message).toContain(`the share of stratum #${rarePlace + 1} (2 of 42 records)`);

    const out = join(dir, 'out');
    await shuffle({ inputs: [input], out, stratify: 'fault', partitions: 2, excludeValues: true });
    const m = JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8'));
    m.strata.values[rarePlace].records += 1;
    writeFileSync(join(out, 'manifest.json'), JSON.stringify(m));
    const report = await verify({ dir: out, replay: false });
    expect(report.mismatches.map((x) => x.item)).toContain(`stratum #${rarePlace + 1} (sum of parts)`);
  });

  it('with values shown: by its values, in all three', async () => {
    const input = join(dir, 'in.csv');
    const failed = (await shuffle({ inputs: [input], out: join(dir, 'never'), stratify: 'fault', partitions: 4, tolerance: 0.1 }).catch((e: unknown) => e)) as RowdeckError;
    expect(failed.message).toMatch(new RegExp(`^Cannot keep class fault="${rare}" \\(2 of 42 records\\)`));
    const p = await profile({ inputs: [input], stratify: 'fault', partitions: 4, tolerance: 0.1 });
    expect(p.warnings.find((w) => w.code === 'TOLERANCE_UNMET')?.message).toContain(`the share of fault="${rare}" (2 of 42 records)`);
    const out = join(dir, 'shown');
    await shuffle({ inputs: [input], out, stratify: 'fault', partitions: 2 });
    const m = JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8'));
    m.strata.values[rarePlace].records += 1;
    writeFileSync(join(out, 'manifest.json'), JSON.stringify(m));
    const report = await verify({ dir: out, replay: false });
    expect(report.mismatches.map((x) => x.item)).toContain(`fault="${rare}" (sum of parts)`);
  });
});
