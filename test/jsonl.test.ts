/**
 * The JSON Lines check in WebAssembly (src/io/jsonl.ts): on lines made by hand from RFC 8259's
 * grammar and on many mutated random lines it takes exactly the lines JSON.parse (ECMA-262, the
 * reference here) reads as one object, and finds the same values of the wanted keys as the reader's JavaScript path; and the reader gives the same records, fields,
 * lines and refusals (with their messages) with it as without it.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { parse } from 'csv-parse/sync';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import seedrandom from 'seedrandom';
import { shuffle, type Manifest } from '../src/index.js';
import { makeTempDir, removeDir } from './helpers/engine.js';
import { JsonlCheck, JsonlChecker, MAX_DEPTH, useJsonlCheck } from '../src/io/jsonl.js';
import { readAll } from './reader.helpers.js';
import { flags } from '../src/flags.js';

// The module's own tests run whatever ROWDECK_JSONL says (test/wasm.test.ts checks the switch);
// where the module does not run, checker() throws and they fail rather than skip.
useJsonlCheck(true);
afterAll(() => useJsonlCheck(flags.jsonl !== 'js'));

/** JSON.parse's verdict: is the line one JSON object? */
function parsesAsObject(line: Buffer): boolean {
  try {
    const v: unknown = JSON.parse(line.toString('utf8'));
    return v !== null && typeof v === 'object' && !Array.isArray(v);
  } catch {
    return false;
  }
}

function checker(keys: string[]): JsonlChecker {
  const c = JsonlChecker.create(keys.map((k) => Buffer.from(k, 'utf8')));
  if (!c) throw new Error('the JSON Lines module does not run here');
  return c;
}

/** The module's verdict on one line (leading whitespace skipped, as the reader does). */
function verdict(c: JsonlChecker, line: Buffer): JsonlCheck {
  const d = Buffer.concat([Buffer.from('\n'), line, Buffer.from('\n')]);
  c.load(d, 0, d.length);
  let a = 1;
  while (a < d.length - 1 && (d[a] === 0x20 || d[a] === 0x09 || d[a] === 0x0d)) a++;
  return c.check(a, d.length - 1);
}

describe('which lines are one JSON object (RFC 8259 grammar; JSON.parse as the reference)', () => {
  let c: JsonlChecker;
  beforeAll(() => void (c = checker(['a'])));
  // Each line with the verdict JSON.parse gives it (also asserted, so a wrong expectation fails).
  const cases: [string, boolean][] = [
    ['{}', true],
    [' \t{ }\t ', true],
    ['{"a":1}', true],
    ['{"a":-0.5e+10,"b":[true,false,null,{"c":[]}],"d":"x"}', true],
    ['{"a":0}', true],
    ['{"a":01}', false], // leading zero (RFC 8259 section 6)
    ['{"a":1.}', false], // a fraction needs digits
    ['{"a":.5}', false],
    ['{"a":-}', false],
    ['{"a":1e}', false],
    ['{"a":1E-7}', true],
    ['{"a":+1}', false],
    ['{"a":tru}', false],
    ['{"a":nul}', false],
    ['{"a":falsey}', false],
    ['{"a":"\\u00e9\\n\\"\\\\\\/\\b\\f\\r\\t"}', true],
    ['{"a":"\\u00zz"}', false], // \u takes four hex digits (section 7)
    ['{"a":"\\x41"}', false], // no such escape
    ['{"a":"\\ud800"}', true], // a lone surrogate escape: JSON.parse takes it
    ['{"a":"tab\there"}', false], // a raw control character in a string
    ['{"a":"é ü 漢"}', true],
    ['{"a":[1,2,]}', false],
    ['{"a":1,}', false],
    ['{,}', false],
    ['{"a" 1}', false],
    ['{"a":1 "b":2}', false],
    ['{"a":1} x', false],
    ['{"a":1}{}', false],
    ['{"a":{"b":[{}]}}', true],
    ['{"a":[[[]]]}', true],
    ['{"a":[}', false],
    ['{"a":{]}', false],
    ['{"a":1', false],
    ['{"a', false],
    ['[1,2]', false], // JSON, but not an object
    ['"text"', false],
    ['42', false],
    ['null', false],
    ['{a:1}', false],
    ["{'a':1}", false],
    ['{"a":1}\r', true], // CR is JSON whitespace
    ['{"a":NaN}', false],
    ['{"a":Infinity}', false],
  ];
  it.each(cases)('%s', (line, ok) => {
    const buf = Buffer.from(line, 'utf8');
    expect(parsesAsObject(buf)).toBe(ok);
    expect(verdict(c, buf)).toBe(ok ? JsonlCheck.Object : JsonlCheck.NotObject);
  });

  it('bytes from 0x80 up: taken inside a string (decoded as U+FFFD), refused outside one', () => {
    const inside = Buffer.concat([Buffer.from('{"a":"x'), Buffer.from([0xff, 0xc3]), Buffer.from('"}')]);
    expect(parsesAsObject(inside)).toBe(true);
    expect(verdict(c, inside)).toBe(JsonlCheck.Object);
    const outside = Buffer.concat([Buffer.from('{"a":1'), Buffer.from([0xc2, 0xa0]), Buffer.from('}')]);
    expect(parsesAsObject(outside)).toBe(false);
    expect(verdict(c, outside)).toBe(JsonlCheck.NotObject);
  });

  it('leaves a top-level key with escapes, and nesting deeper than MAX_DEPTH, to JSON.parse', () => {
    expect(verdict(c, Buffer.from('{"\\u0061":1}'))).toBe(JsonlCheck.Undecided);
    expect(verdict(c, Buffer.from('{"b":{"\\u0061":1}}'))).toBe(JsonlCheck.Object); // nested: checked here
    const deep = (n: number): Buffer => Buffer.from(`{"a":${'['.repeat(n)}${']'.repeat(n)}}`);
    expect(verdict(c, deep(MAX_DEPTH - 1))).toBe(JsonlCheck.Object);
    expect(verdict(c, deep(MAX_DEPTH + 5))).toBe(JsonlCheck.Undecided);
  });
});

describe('wanted keys', () => {
  it('finds the last member with each key: its token and kind (string, null, other)', () => {
    const c = checker(['a', 'b', 'é', 'missing']);
    const line = Buffer.from('{"a":1,"b":"x","a":[1,{"a":2}] , "é" : null ,"n":{"b":3}}', 'utf8');
    const d = Buffer.concat([Buffer.from('\n'), line]);
    c.load(d, 0, d.length);
    expect(c.check(1, d.length)).toBe(JsonlCheck.Object);
    const token = (w: number): string => d.toString('utf8', c.start(w), c.end(w));
    expect(token(0)).toBe('[1,{"a":2}]');
    expect(c.kind(0)).toBe(0);
    expect(token(1)).toBe('"x"');
    expect(c.kind(1)).toBe(2);
    expect(token(2)).toBe('null');
    expect(c.kind(2)).toBe(3);
    expect(token(3)).toBe('');
    expect(c.kind(3)).toBe(3);
  });
});

describe('many wanted keys, in any order', () => {
  it('finds each key whatever the order of the members, with keys wanted twice, absent, repeated and prefixes of others (JSON.parse as the reference)', () => {
    // The module looks for a key starting after the one it matched last: objects in the wanted
    // order find theirs at once, others must still find every one.
    const rng = seedrandom('many-keys');
    const names = Array.from({ length: 300 }, (_, i) => `k${i}`);
    const wanted = [...names, 'k7', 'k1', 'k29']; // k1 is a prefix of k10..k19 and k100..k199
    const c = checker(wanted);
    for (let trial = 0; trial < 40; trial++) {
      const present = names.filter(() => rng() < 0.9);
      const order = trial % 3 === 0 ? present : trial % 3 === 1 ? present.slice().reverse() : present.slice().sort(() => rng() - 0.5);
      const members = order.map((k) => `"${k}":${Math.floor(rng() * 1000)}`);
      if (trial % 4 === 0) members.push(`"k3":"again"`, `"k1000":1`); // a repeat (the last counts), and a key not wanted
      const line = Buffer.from(`{${members.join(',')}}`);
      expect(verdict(c, line)).toBe(JsonlCheck.Object);
      const obj = JSON.parse(line.toString()) as Record<string, unknown>;
      const d = Buffer.concat([Buffer.from('\n'), line, Buffer.from('\n')]);
      wanted.forEach((k, w) => {
        const v = obj[k];
        if (v === undefined) expect(c.kind(w)).toBe(3);
        else expect(d.toString('utf8', c.start(w), c.end(w))).toBe(JSON.stringify(v));
      });
    }
  });
});

/** A random JSON value of bounded depth. */
function randomValue(rng: () => number, depth: number): unknown {
  const r = rng();
  if (depth > 2 || r < 0.55) {
    const k = Math.floor(rng() * 7);
    if (k === 0) return Math.floor(rng() * 2000) - 1000;
    if (k === 1) return (rng() - 0.5) * 10 ** Math.floor(rng() * 40 - 20);
    if (k === 2) return rng() < 0.5;
    if (k === 3) return null;
    const chars = ['a', 'Z', ' ', '"', '\\', '/', '\n', '\t', '\u0001', 'é', '漢', '😀', ',', ':', '{', ']'];
    let s = '';
    const n = Math.floor(rng() * 8);
    for (let i = 0; i < n; i++) s += chars[Math.floor(rng() * chars.length)];
    return s;
  }
  if (r < 0.75) return Array.from({ length: Math.floor(rng() * 4) }, () => randomValue(rng, depth + 1));
  const o: Record<string, unknown> = {};
  const keys = ['a', 'b', 'cls', 'é', 'x y', 'a"b', ''];
  for (let i = Math.floor(rng() * 5); i > 0; i--) o[keys[Math.floor(rng() * keys.length)]!] = randomValue(rng, depth + 1);
  return o;
}

/** A random object line, with random whitespace between tokens, sometimes mutated. */
function randomLine(rng: () => number): Buffer {
  const obj: Record<string, unknown> = {};
  for (let i = Math.floor(rng() * 6); i > 0; i--) obj[['a', 'b', 'cls', 'é', 'x y', 'n'][Math.floor(rng() * 6)]!] = randomValue(rng, 1);
  let text = JSON.stringify(obj, null, rng() < 0.3 ? ' ' : undefined).replace(/\n/g, rng() < 0.5 ? ' ' : '\r');
  if (rng() < 0.3 && text.length > 2) text = `${text.slice(0, 1)} \t ${text.slice(1)}`;
  let buf = Buffer.from(text, 'utf8');
  const mutations = rng() < 0.6 ? 1 + Math.floor(rng() * 2) : 0;
  const pieces = ['{', '}', '[', ']', '"', '\\', ',', ':', '0', '-', '.', 'e', 't', 'n', ' ', 'u', '\u0007', '\u00ff'];
  for (let m = 0; m < mutations; m++) {
    const at = Math.floor(rng() * (buf.length + 1));
    const kind = rng();
    const piece = Buffer.from(pieces[Math.floor(rng() * pieces.length)]!, 'latin1');
    if (kind < 0.4) buf = Buffer.concat([buf.subarray(0, at), piece, buf.subarray(at)]);
    else if (kind < 0.7) buf = Buffer.concat([buf.subarray(0, at), buf.subarray(at + 1)]);
    else if (at < buf.length) buf = Buffer.concat([buf.subarray(0, at), piece, buf.subarray(at + 1)]);
  }
  // The reader splits lines at LF: a line never holds one.
  return Buffer.from(buf.toString('latin1').replace(/\n/g, ' '), 'latin1');
}

describe('differential against JSON.parse on random and mutated lines (seeded)', () => {
  it('takes exactly the lines JSON.parse reads as one object, and finds the wanted values the JavaScript path finds', () => {
    const rng = seedrandom('rowdeck-jsonl-check');
    const c = checker(['a', 'cls', 'é']);
    let taken = 0;
    let refused = 0;
    for (let t = 0; t < 6000; t++) {
      const line = randomLine(rng);
      const v = verdict(c, line);
      const ok = parsesAsObject(line);
      if (v !== JsonlCheck.Undecided) expect({ line: line.toString('latin1'), v }).toEqual({ line: line.toString('latin1'), v: ok ? JsonlCheck.Object : JsonlCheck.NotObject });
      if (v === JsonlCheck.Object) taken++;
      if (v === JsonlCheck.NotObject) refused++;
    }
    // Both kinds well represented, so the comparison means something.
    expect(taken).toBeGreaterThan(1500);
    expect(refused).toBeGreaterThan(1500);
  });

  it('the reader gives the same records, fields, lines and refusals with the module and without it', () => {
    const rng = seedrandom('rowdeck-jsonl-reader');
    const lines: Buffer[] = [Buffer.from(JSON.stringify({ a: 1, cls: 'x', 'é': null, n: [] }))];
    for (let t = 0; t < 3000; t++) lines.push(rng() < 0.02 ? Buffer.from(' \t') : randomLine(rng));
    const text = Buffer.concat(lines.flatMap((l, i) => [l, Buffer.from(i % 7 === 3 ? '\r\n' : '\n')]));
    const opts = { format: 'jsonl' as const, wanted: ['cls', 'a', 'é', 'cls'], file: 'x.jsonl', onBadRecord: 'skip' as const };
    useJsonlCheck(false);
    const js = readAll(text, opts, 4096);
    useJsonlCheck(true);
    const wasm = readAll(text, opts, 4096);
    expect(wasm.records).toEqual(js.records);
    expect(wasm.fields).toEqual(js.fields);
    expect(wasm.lines).toEqual(js.lines);
    expect(wasm.offsets).toEqual(js.offsets);
    expect(wasm.rejected.map((r) => [r.line, r.reason])).toEqual(js.rejected.map((r) => [r.line, r.reason]));
    expect(js.records.length).toBeGreaterThan(800);
    expect(js.rejected.length).toBeGreaterThan(800);
  });
});

describe('strata of quoted values (the scatter looks plain ASCII up by its bytes)', () => {
  const dir = makeTempDir('rowdeck-jsonl-');
  afterAll(() => removeDir(dir));

  /** Records per stratum value in the manifest, as a sorted list of [value, records]. */
  const strataOf = (m: Manifest): [string | null, number][] =>
    m.strata.values.map((v): [string | null, number] => [v.value?.[0] ?? null, v.records]).sort((x, y) => String(x[0]).localeCompare(String(y[0])));
  /** The same, counted here from values decoded by JSON.parse or csv-parse (the references). */
  const counted = (values: (string | null)[]): [string | null, number][] => {
    const n = new Map<string | null, number>();
    for (const v of values) n.set(v, (n.get(v) ?? 0) + 1);
    return [...n].sort((x, y) => String(x[0]).localeCompare(String(y[0])));
  };

  it('JSON strings: escaped, non-ASCII, empty, null, absent and invalid UTF-8 values land where their decoded text says', async () => {
    const raw = ['"none"', '"caf\\u00e9"', '"café"', '"a\\"b"', '""', 'null', null, '"x\\\\y"', '"bad\xff"', '"bad\\ufffd"', '7', '"7"', '"none"'];
    const lines = raw.map((v, i) => Buffer.from(v === null ? `{"id":${i}}` : `{"id":${i},"fault":${v}}`, v === null || !v.includes('\xff') ? 'utf8' : 'latin1'));
    const file = join(dir, 'quoted.jsonl');
    writeFileSync(file, Buffer.concat(lines.flatMap((l) => [l, Buffer.from('\n')])));
    const m = await shuffle({ inputs: [file], out: join(dir, 'out-jsonl'), partitions: 2, stratify: 'fault', tolerance: 2, threads: 1 });
    const decoded = lines.map((l) => {
      const v = (JSON.parse(l.toString('utf8')) as { fault?: unknown }).fault;
      return v === undefined || v === null ? null : String(v);
    });
    expect(strataOf(m)).toEqual(counted(decoded));
    // 'café' written two ways is one stratum; the number 7 and the string "7" are one too.
    expect(strataOf(m).find(([v]) => v === 'café')?.[1]).toBe(2);
    expect(strataOf(m).find(([v]) => v === '7')?.[1]).toBe(2);
    // Invalid UTF-8 decodes to U+FFFD, so it shares the stratum of an escaped U+FFFD.
    expect(strataOf(m).find(([v]) => v === 'bad\ufffd')?.[1]).toBe(2);
  });

  it('CSV: a quoted value is the same stratum as the unquoted one; doubled quotes and non-ASCII decode first; "" is not missing', async () => {
    const values = ['none', '"none"', '"a""b"', '"café"', 'café', '""', '', '"x,y"', 'none'];
    const file = join(dir, 'quoted.csv');
    writeFileSync(file, `id,fault\n${values.map((v, i) => `${i},${v}`).join('\n')}\n`);
    const m = await shuffle({ inputs: [file], out: join(dir, 'out-csv'), partitions: 2, stratify: 'fault', tolerance: 2, threads: 1 });
    // An empty unquoted field is a missing value; "" is the empty text (csv-parse tells them apart by `quoting`).
    const rows = parse(readFileSync(file), { columns: true, cast: (v, ctx) => (v === '' && !ctx.quoting ? null : v) }) as { fault: string | null }[];
    expect(strataOf(m)).toEqual(counted(rows.map((r) => r.fault)));
    expect(strataOf(m).find(([v]) => v === 'none')?.[1]).toBe(3);
  });
});
