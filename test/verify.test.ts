/**
 * `verify()` and `rowdeck verify`: clean runs of every mode verify; then each kind of damage is
 * made by hand and the exact mismatch must be reported (and the CLI must exit 1).
 *
 * Expected values come from outside the code under test: sha256 from node:crypto over the file
 * bytes (FIPS 180-4), record counts and classes from csv-parse (the reference CSV parser, RFC
 * 4180) or JSON.parse, and line numbers by counting LF bytes (the physical-line rule an editor
 * follows; common practice). Exit codes 0/1/2 follow the common Unix practice the CLI documents.
 */
import { spawnSync } from 'node:child_process';
import { createHash } from 'node:crypto';
import { cpSync, existsSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { gzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { shuffle, verify, type Manifest, type ShuffleOptions, type VerifyReport } from '../src/index.js';
import { makeSensorCsv, makeTempDir, parseCsv, readPart, removeDir } from './helpers/engine.js';

const CLI = fileURLToPath(new URL('../dist/cli/main.cjs', import.meta.url));

let dir: string;
let input: string;
let inputText: string;
let jsonl: string;
let jsonlText: string;

/** The same sensor rows as JSON objects, plus two empty objects (one with blanks inside and after). */
function toJsonLines(csv: string): string {
  const { rows } = parseCsv(csv);
  const lines = rows.map((r) => JSON.stringify({ id: Number(r[0]), sensor: r[1], site: r[2], reading: Number(r[3]), note: r[4] === '' ? null : r[4], fault: r[5] }));
  lines.splice(7, 0, '{}');
  lines.splice(300, 0, '{ }  ');
  return lines.join('\n') + '\n';
}

beforeAll(() => {
  if (!existsSync(CLI)) throw new Error(`${CLI} not found: run "npm run build" first (npm test does it).`);
  dir = makeTempDir('rowdeck-verify-');
  input = join(dir, 'readings.csv');
  inputText = makeSensorCsv({ rows: 3000, seed: 17, sensors: 60 });
  writeFileSync(input, inputText);
  jsonl = join(dir, 'readings.jsonl');
  jsonlText = toJsonLines(inputText);
  writeFileSync(jsonl, jsonlText);
});
afterAll(() => removeDir(dir));

function runCli(args: string[]): { status: number | null; stdout: string; stderr: string } {
  const r = spawnSync(process.execPath, [CLI, ...args], { cwd: dir, encoding: 'utf8', timeout: 60_000 });
  if (r.error) throw r.error;
  return r;
}

async function run(name: string, o: Omit<ShuffleOptions, 'out' | 'inputs'> & { inputs?: string[] }): Promise<{ out: string; m: Manifest }> {
  const out = join(dir, name);
  const m = await shuffle({ inputs: [input], seed: `verify-${name}`, ...o, out });
  return { out, m };
}

/** A copy of an output folder to damage. */
function copyOut(src: string, name: string): string {
  const d = join(dir, name);
  rmSync(d, { recursive: true, force: true });
  cpSync(src, d, { recursive: true });
  return d;
}

function sha256(path: string): string {
  return createHash('sha256').update(readFileSync(path)).digest('hex');
}

/** "file check" of every mismatch, sorted: the exact set of what was found wrong. */
function failed(r: VerifyReport): string[] {
  return [...new Set(r.mismatches.map((x) => `${x.file} ${x.check}`))].sort();
}

function statusOf(r: VerifyReport, file: string, check: string): string | undefined {
  return r.checks.find((c) => c.file === file && c.check === check)?.status;
}

/** Physical line (1-based) at which byte offset `at` of `text` lies: one plus the LFs before it. */
function lineAt(text: string, at: number): number {
  let n = 1;
  for (let i = 0; i < at; i++) if (text.charCodeAt(i) === 10) n++;
  return n;
}

/** Lines of a CSV part that are whole records on their own (no quote: the notes' breaks are inside quotes). */
function plainLines(text: string): number[] {
  return text
    .split('\n')
    .map((l, i) => ({ l, i }))
    .filter(({ l, i }) => i > 0 && l !== '' && !l.includes('"'))
    .map(({ i }) => i);
}

describe('clean runs verify', () => {
  const expectClean = (r: VerifyReport, m: Manifest): void => {
    expect(r.mismatches).toEqual([]);
    expect(r.ok).toBe(true);
    expect(r.parts).toBe(m.output.parts.length);
    expect(r.records).toBe(m.input.records);
    expect(r.checks.filter((c) => c.status === 'failed')).toEqual([]);
    for (const p of m.output.parts) {
      for (const c of ['present', 'bytes', 'sha256', 'readable', 'records', 'fingerprint']) expect(statusOf(r, p.path, c), `${p.path} ${c}`).toBe('passed');
    }
    for (const c of ['output records', 'output fingerprint', 'input fingerprint', 'strata totals', 'balance']) expect(statusOf(r, 'manifest.json', c), c).toBe('passed');
    // Hash assignment keeps no tolerance: the check is skipped, saying why.
    expect(statusOf(r, 'manifest.json', 'tolerance')).toBe((m.options as { assign: string }).assign === 'hash' ? 'skipped' : 'passed');
  };

  it('CSV with folds: every per-class, per-fold and fold x class count is checked and holds', async () => {
    const { out, m } = await run('folds', { partitions: 3, folds: 4, stratify: 'fault' });
    const r = await verify({ dir: out, against: [input] });
    expectClean(r, m);
    for (const p of m.output.parts) for (const c of ['header', 'strata', 'fold values', 'folds', 'fold strata']) expect(statusOf(r, p.path, c), `${p.path} ${c}`).toBe('passed');
    expect(r.against).toEqual({ inputs: [input], records: 3000, rejected: 0, fingerprint: m.input.fingerprint, differences: null });
    // The record count verify accepted is the one csv-parse finds in the input.
    expect(parseCsv(inputText).rows.length).toBe(r.against!.records);
    expect(runCli(['verify', out, '--against', input]).status).toBe(0);
  });

  it('--stats: each part\'s column statistics and the whole input\'s are computed again from the files and hold', async () => {
    const runs = [
      await run('stats-folds', { partitions: 3, folds: 2, stratify: 'fault', stats: true }),
      await run('stats-jsonl', { inputs: [jsonl], partitions: 2, folds: 3, stratify: 'fault', foldColumn: 'cv "fold"', tolerance: 5, stats: true }),
      await run('stats-no-values', { partitions: 3, stratify: 'fault,site', stats: true, excludeValues: true }),
    ];
    for (const { out, m } of runs) {
      expect(m.input.stats).toBeDefined();
      for (const threads of [0, 2]) {
        const r = await verify({ dir: out, threads });
        expect(r.mismatches, out).toEqual([]);
        for (const p of m.output.parts) expect(statusOf(r, p.path, 'statistics'), `${out} ${p.path}`).toBe('passed');
        expect(statusOf(r, 'manifest.json', 'input statistics'), out).toBe('passed');
      }
    }
    // Without --stats there are none to check.
    const { out } = await run('no-stats', { partitions: 2, stratify: 'fault' });
    expect((await verify({ dir: out })).checks.some((c) => /statistics/.test(c.check))).toBe(false);
  });

  it('named splits, several partitions each (parts in sub-folders)', async () => {
    const { out, m } = await run('splits', { partitions: 2, split: 'train=0.7,valid=0.2,test=0.1', stratify: 'fault', folds: 2 });
    expect(m.output.parts.map((p) => p.path)).toContain('valid/part-00001.csv');
    expectClean(await verify({ dir: out, against: [input] }), m);
  });

  it('gzip parts: sha256 and size of the compressed file, records of the decompressed one', async () => {
    const { out, m } = await run('gzip', { partitions: 2, folds: 3, stratify: 'fault', gzip: true });
    const r = await verify({ dir: out });
    expectClean(r, m);
    // sha256 is of the bytes on disk (node:crypto); the records are csv-parse's count after gunzip.
    for (const p of m.output.parts) {
      expect(p.sha256).toBe(sha256(join(out, p.path)));
      expect(parseCsv(readPart(join(out, p.path))).rows.length).toBe(p.records);
    }
  });

  it('JSON Lines with folds, empty objects included, and a fold column name that needs JSON escaping', async () => {
    const { out, m } = await run('jsonl', { inputs: [jsonl], partitions: 2, folds: 3, stratify: 'fault', foldColumn: 'cv "fold"', tolerance: 5 });
    const r = await verify({ dir: out, against: [jsonl] });
    expectClean(r, m);
    for (const p of m.output.parts) for (const c of ['strata', 'folds', 'fold strata']) expect(statusOf(r, p.path, c)).toBe('passed');
    // JSON Lines has no header line to check.
    expect(r.checks.some((c) => c.check === 'header')).toBe(false);
    // Every output object carries the fold under the escaped name (JSON.parse, independent of the reader).
    const objs = m.output.parts.flatMap((p) => readFileSync(join(out, p.path), 'utf8').split('\n').filter(Boolean).map((l) => JSON.parse(l) as Record<string, unknown>));
    expect(objs.length).toBe(3002);
    expect(objs.every((o) => typeof o['cv "fold"'] === 'number')).toBe(true);
  });

  it('JSON Lines with an optional key, --stats: a part whose first object lacks the key is read with the input\'s keys', async () => {
    // The first input object has every key; every other object leaves "note" out.
    const optional = join(dir, 'optional.jsonl');
    const lines = Array.from({ length: 400 }, (_, i) => JSON.stringify({ id: i, ...(i % 2 === 0 ? { note: `n${i % 7}` } : {}), fault: i % 5 === 0 ? 'drift' : 'ok' }));
    writeFileSync(optional, lines.join('\n') + '\n');
    const { out, m } = await run('optional', { inputs: [optional], partitions: 6, stratify: 'fault', stats: true });
    const firsts = m.output.parts.map((p) => JSON.parse(readFileSync(join(out, p.path), 'utf8').split('\n')[0]!) as Record<string, unknown>);
    // The case this test is about happened (fixed seed): some part begins with an object without "note".
    expect(firsts.some((o) => !('note' in o))).toBe(true);
    const r = await verify({ dir: out, against: [optional] });
    expectClean(r, m);
    for (const p of m.output.parts) expect(statusOf(r, p.path, 'statistics')).toBe('passed');
  });

  it('quantile bins and two stratify columns', async () => {
    const { out, m } = await run('bins', { partitions: 3, stratify: 'reading:bins=4,site' });
    expect(m.strata.bins.length).toBe(1);
    const r = await verify({ dir: out });
    expectClean(r, m);
    for (const p of m.output.parts) expect(statusOf(r, p.path, 'strata')).toBe('passed');
  });

  it('--group (units are groups, shares only near their targets) and hash assignment', async () => {
    const g = await run('group', { partitions: 2, folds: 3, group: 'sensor', stratify: 'fault', tolerance: 2 });
    expectClean(await verify({ dir: g.out, against: [input] }), g.m);
    const h = await run('hash', { partitions: 3, assign: 'hash', key: 'id', stratify: 'fault' });
    expectClean(await verify({ dir: h.out }), h.m);
  });

  it('excluded values: the per-class checks are reported as skipped, not passed', async () => {
    const { out, m } = await run('excluded', { partitions: 2, folds: 2, stratify: 'fault', excludeValues: true });
    expect(m.strata.values.every((v) => v.value === null)).toBe(true);
    const r = await verify({ dir: out });
    expect(r.ok).toBe(true);
    for (const p of m.output.parts) {
      expect(statusOf(r, p.path, 'strata')).toBe('skipped');
      expect(statusOf(r, p.path, 'fold strata')).toBe('skipped');
      // What does not need the values is still checked.
      expect(statusOf(r, p.path, 'folds')).toBe('passed');
      expect(statusOf(r, p.path, 'fingerprint')).toBe('passed');
    }
    expect(r.checks.find((c) => c.file === 'manifest.json' && c.check === 'balance')?.note).toMatch(/manifest's counts/);
  });

  it('quarantine: rejected.csv is present and holds input.rejected records', async () => {
    const bad = join(dir, 'bad.csv');
    // Line 4 has one field too many, line 6 one too few (RFC 4180 section 2.4: same field count per record).
    writeFileSync(bad, 'id,fault\n1,ok\n2,ok\n3,ok,extra\n4,drift\n5\n6,ok\n');
    const { out, m } = await run('quarantine', { inputs: [bad], onBadRecord: 'quarantine', stratify: 'fault', tolerance: 5 });
    expect(m.input.rejected).toBe(2);
    const r = await verify({ dir: out, against: [bad] });
    expect(r.mismatches).toEqual([]);
    expect(statusOf(r, 'rejected.csv', 'records')).toBe('passed');
    expect(r.against!.rejected).toBe(2);
    // The same check fails once a rejected record is removed from the file.
    const rows = readFileSync(join(out, 'rejected.csv'), 'utf8').trimEnd().split('\n');
    writeFileSync(join(out, 'rejected.csv'), rows.slice(0, -1).join('\n') + '\n');
    const r2 = await verify({ dir: out });
    expect(r2.mismatches).toEqual([{ file: 'rejected.csv', check: 'records', expected: 2, found: 1 }]);
  });

  it('CSV without a header, and a header-only part (an empty split)', async () => {
    const noHead = join(dir, 'nohead.csv');
    writeFileSync(noHead, inputText.slice(inputText.indexOf('\n') + 1));
    const a = await run('nohead', { inputs: [noHead], header: false, partitions: 2, folds: 2, stratify: 'column_6' });
    expectClean(await verify({ dir: a.out, against: [noHead] }), a.m);
    const b = await run('emptysplit', { split: 'all=3000,none=*', stratify: 'fault' });
    expect(b.m.output.parts.map((p) => p.records)).toEqual([3000, 0]);
    expectClean(await verify({ dir: b.out }), b.m);
  });
});

describe('damage is found and named', () => {
  let base: { out: string; m: Manifest };
  beforeAll(async () => {
    base = await run('base', { partitions: 3, folds: 4, stratify: 'fault' });
  });

  it('one flipped byte: sha256 and fingerprint of that part (and the output total), size unchanged', async () => {
    const d = copyOut(base.out, 'flip');
    const part = base.m.output.parts[1]!;
    const path = join(d, part.path);
    const buf = readFileSync(path);
    // The first digit of the second record's id: still a valid record, now a different one.
    const at = buf.indexOf(10) + 1;
    buf[at] = buf[at] === 0x39 ? 0x38 : buf[at]! + 1;
    writeFileSync(path, buf);
    const r = await verify({ dir: d });
    expect(r.ok).toBe(false);
    expect(failed(r)).toEqual(['manifest.json output fingerprint', `${part.path} fingerprint`, `${part.path} sha256`]);
    expect(r.mismatches.find((x) => x.check === 'sha256')).toEqual({ file: part.path, check: 'sha256', expected: part.sha256, found: sha256(path) });
    expect(statusOf(r, part.path, 'bytes')).toBe('passed');
    expect(statusOf(r, part.path, 'records')).toBe('passed');
    const cli = runCli(['verify', d]);
    expect(cli.status).toBe(1);
    expect(cli.stderr).toContain(`${part.path}: sha256: expected ${part.sha256}, found ${sha256(path)}`);
    expect(cli.stderr).toMatch(/does not match its manifest \(RDK_VERIFY_FAILED\): 3 mismatch/);
    // --quiet drops the summary line but keeps the list.
    const quiet = runCli(['verify', d, '--quiet']);
    expect(quiet.status).toBe(1);
    expect(quiet.stderr.trimEnd().split('\n')).toEqual(formatExpected(r));
  });

  it('a deleted part: reported missing, its other checks skipped', async () => {
    const d = copyOut(base.out, 'deleted');
    const part = base.m.output.parts[2]!;
    rmSync(join(d, part.path));
    const r = await verify({ dir: d });
    expect(r.mismatches).toEqual([{ file: part.path, check: 'present', expected: 'a file', found: 'missing' }]);
    expect(statusOf(r, part.path, 'sha256')).toBe('skipped');
    expect(statusOf(r, 'manifest.json', 'output fingerprint')).toBe('skipped');
    // With the inputs: the part's records are listed as missing, each with its input line.
    const ra = await verify({ dir: d, against: [input] });
    expect(ra.against!.differences!.missing).toBe(part.records);
    expect(ra.against!.differences!.extra).toBe(0);
    const listed = ra.against!.differences!.listed;
    expect(listed.length).toBe(20);
    for (const x of listed) {
      const at = inputText.indexOf(x.record.split(',').slice(0, 2).join(',') + ',');
      expect(x.file).toBe(input);
      expect(x.line).toBe(lineAt(inputText, at));
    }
    expect(runCli(['verify', d]).status).toBe(1);
  });

  it('a class the manifest never had: counted where it stands, with the first line it is on', async () => {
    const d = copyOut(base.out, 'unknown-class');
    const p0 = base.m.output.parts[0]!;
    const text = readFileSync(join(d, p0.path), 'utf8');
    const lines = text.split('\n');
    // Two plain records (header is line 1) get the class "meltdown" instead of theirs.
    const [a, b] = plainLines(text).slice(3, 5) as [number, number];
    const rename = (l: string): string => {
      const cells = l.split(',');
      cells[5] = 'meltdown';
      return cells.join(',');
    };
    lines[a] = rename(lines[a]!);
    lines[b] = rename(lines[b]!);
    writeFileSync(join(d, p0.path), lines.join('\n'));
    const r = await verify({ dir: d });
    const strata = r.mismatches.filter((x) => x.check === 'strata');
    expect(strata).toContainEqual({ file: p0.path, check: 'strata', item: 'fault="meltdown"', line: a + 1, expected: 0, found: 2 });
    // The two records left their own classes: those counts are short by what was renamed.
    const lost = strata.filter((x) => x.item !== 'fault="meltdown"').reduce((n, x) => n + (Number(x.expected) - Number(x.found)), 0);
    expect(lost).toBe(2);
  });

  it('parts read on worker threads give the same report as parts read here, damaged or not', async () => {
    const d = copyOut(base.out, 'threads');
    const ps = base.m.output.parts;
    // Damage of several kinds in three parts: a flipped byte, a renamed class, a doubled record.
    const flip = readFileSync(join(d, ps[0]!.path));
    const at = flip.indexOf(10) + 1;
    flip[at] = flip[at] === 0x39 ? 0x38 : flip[at]! + 1;
    writeFileSync(join(d, ps[0]!.path), flip);
    const t1 = readFileSync(join(d, ps[1]!.path), 'utf8').split('\n');
    const k = plainLines(t1.join('\n'))[2]!;
    t1[k] = t1[k]!.split(',').map((c, i) => (i === 5 ? 'meltdown' : c)).join(',');
    writeFileSync(join(d, ps[1]!.path), t1.join('\n'));
    const t2 = readFileSync(join(d, ps[2]!.path), 'utf8');
    writeFileSync(join(d, ps[2]!.path), t2 + t2.split('\n')[plainLines(t2)[0]!] + '\n');
    for (const folder of [base.out, d]) {
      const here = await verify({ dir: folder, against: [input], threads: 0 });
      const workers = await verify({ dir: folder, against: [input], threads: 2 });
      expect(workers).toEqual(here);
      expect(here.ok).toBe(folder === base.out);
    }
    const cli = runCli(['verify', d, '--threads', '2']);
    expect(cli.status).toBe(1);
    expect(cli.stderr).toContain('fault="meltdown"');
    const bad = runCli(['verify', d, '--threads', 'two']);
    expect(bad.status).toBe(2);
    expect(bad.stderr).toContain('Invalid option --threads: expected an integer from 0 to 256, got "two"');
  });

  it('a record moved from one part to another: both parts fail their counts, the total fingerprint still matches', async () => {
    const d = copyOut(base.out, 'moved');
    const [p0, p1] = [base.m.output.parts[0]!, base.m.output.parts[1]!];
    const t0 = readFileSync(join(d, p0.path), 'utf8');
    const lines0 = t0.split('\n');
    const k = plainLines(t0)[5]!;
    const moved = lines0[k]!;
    const row = parseCsv(`h1,h2,h3,h4,h5,h6,h7\n${moved}\n`).rows[0]!;
    const [fault, fold] = [row[5]!, Number(row[6])];
    writeFileSync(join(d, p0.path), lines0.filter((_, i) => i !== k).join('\n'));
    writeFileSync(join(d, p1.path), readFileSync(join(d, p1.path), 'utf8') + moved + '\n');
    const r = await verify({ dir: d });
    const perPart = (p: string): string[] => ['bytes', 'fingerprint', 'fold strata', 'folds', 'records', 'sha256', 'strata'].map((c) => `${p} ${c}`);
    // The class shares moved too, so the recomputed deviation may differ from the recorded one.
    expect(failed(r).filter((x) => x !== 'manifest.json balance')).toEqual([...perPart(p0.path), ...perPart(p1.path)].sort());
    expect(statusOf(r, 'manifest.json', 'output fingerprint')).toBe('passed');
    expect(statusOf(r, 'manifest.json', 'input fingerprint')).toBe('passed');
    const item = `fault=${JSON.stringify(fault)}`;
    const s = base.m.strata.values.findIndex((v) => v.value![0] === fault);
    expect(r.mismatches.filter((x) => x.check === 'records')).toEqual([
      { file: p0.path, check: 'records', expected: p0.records, found: p0.records - 1 },
      { file: p1.path, check: 'records', expected: p1.records, found: p1.records + 1 },
    ]);
    expect(r.mismatches.filter((x) => x.check === 'strata')).toEqual([
      { file: p0.path, check: 'strata', item, expected: p0.strata[s], found: p0.strata[s]! - 1 },
      { file: p1.path, check: 'strata', item, expected: p1.strata[s], found: p1.strata[s]! + 1 },
    ]);
    expect(r.mismatches.filter((x) => x.check === 'folds')).toEqual([
      { file: p0.path, check: 'folds', item: `fold ${fold}`, expected: p0.folds![fold], found: p0.folds![fold]! - 1 },
      { file: p1.path, check: 'folds', item: `fold ${fold}`, expected: p1.folds![fold], found: p1.folds![fold]! + 1 },
    ]);
    expect(runCli(['verify', d]).status).toBe(1);
  });

  it('a duplicated record: counts and fingerprints fail; with the inputs it is listed as extra, with its part line', async () => {
    const d = copyOut(base.out, 'dup');
    const p2 = base.m.output.parts[2]!;
    const text = readFileSync(join(d, p2.path), 'utf8');
    const lines = text.split('\n');
    const k = plainLines(text)[3]!;
    lines.splice(k + 1, 0, lines[k]!);
    writeFileSync(join(d, p2.path), lines.join('\n'));
    const r = await verify({ dir: d, against: [input] });
    expect(failed(r).filter((x) => x !== 'manifest.json balance')).toEqual(
      [
        '(inputs) differences',
        '(inputs) output fingerprint',
        'manifest.json output fingerprint',
        'manifest.json output records',
        // replay: the file is not what the manifest's seed gives either.
        ...['bytes', 'fingerprint', 'fold strata', 'folds', 'records', 'replay', 'sha256', 'strata'].map((c) => `${p2.path} ${c}`),
      ].sort(),
    );
    expect(statusOf(r, '(inputs)', 'input fingerprint')).toBe('passed');
    const diff = r.against!.differences!;
    expect([diff.missing, diff.extra]).toEqual([0, 1]);
    // The copy is found first at the original's line (k is 0-based, lines are 1-based).
    expect(diff.listed).toEqual([{ kind: 'extra', file: p2.path, line: k + 1, record: lines[k]!.slice(0, lines[k]!.lastIndexOf(',')), copies: { input: 1, output: 2 } }]);
    const cli = runCli(['verify', d, '--against', input]);
    expect(cli.status).toBe(1);
    expect(cli.stderr).toContain(`${p2.path}:${k + 1}: not in the inputs (2 identical copies in the output, 1 in the inputs): ${diff.listed[0]!.record}`);
  });

  it('a fold value changed: folds fail, the fingerprint (fold column cut off) still holds', async () => {
    const d = copyOut(base.out, 'refold');
    const p0 = base.m.output.parts[0]!;
    const text = readFileSync(join(d, p0.path), 'utf8');
    const lines = text.split('\n');
    const k = plainLines(text)[0]!;
    const old = Number(lines[k]!.slice(lines[k]!.lastIndexOf(',') + 1));
    const neu = (old + 1) % 4;
    lines[k] = lines[k]!.slice(0, lines[k]!.lastIndexOf(',') + 1) + String(neu);
    writeFileSync(join(d, p0.path), lines.join('\n'));
    const r = await verify({ dir: d });
    expect(failed(r).filter((x) => x !== 'manifest.json balance')).toEqual([`${p0.path} fold strata`, `${p0.path} folds`, `${p0.path} sha256`]);
    expect(statusOf(r, p0.path, 'fingerprint')).toBe('passed');
    expect(r.mismatches.filter((x) => x.check === 'folds').map((x) => [x.item, x.found])).toEqual([
      [`fold ${Math.min(old, neu)}`, p0.folds![Math.min(old, neu)]! + (neu < old ? 1 : -1)],
      [`fold ${Math.max(old, neu)}`, p0.folds![Math.max(old, neu)]! + (neu > old ? 1 : -1)],
    ]);
  });

  it('a fold value out of range, and a record without its fold field, are named with their line', async () => {
    const d = copyOut(base.out, 'badfold');
    const p1 = base.m.output.parts[1]!;
    const text = readFileSync(join(d, p1.path), 'utf8');
    const lines = text.split('\n');
    const k = plainLines(text)[2]!;
    lines[k] = lines[k]!.slice(0, lines[k]!.lastIndexOf(',') + 1) + '7';
    writeFileSync(join(d, p1.path), lines.join('\n'));
    const r = await verify({ dir: d });
    expect(r.mismatches.find((x) => x.check === 'fold values')).toEqual({ file: p1.path, check: 'fold values', line: k + 1, expected: 'a fold column with values 0..3', found: '"7" (1 record)' });

    // JSON Lines: drop the fold field from one object.
    const j = await run('jsonl-fold', { inputs: [jsonl], partitions: 2, folds: 3, stratify: 'fault', tolerance: 5 });
    const jd = copyOut(j.out, 'jsonl-nofold');
    const jp = j.m.output.parts[0]!;
    const jl = readFileSync(join(jd, jp.path), 'utf8').split('\n');
    const o = JSON.parse(jl[9]!) as Record<string, unknown>;
    delete o.fold;
    jl[9] = JSON.stringify(o);
    writeFileSync(join(jd, jp.path), jl.join('\n'));
    const jr = await verify({ dir: jd });
    expect(jr.mismatches.find((x) => x.check === 'fold values')).toEqual({ file: jp.path, check: 'fold values', line: 10, expected: 'a fold column with values 0..2', found: 'no fold column (1 record)' });
    // The object without its fold is the original record: the fingerprint still holds.
    expect(statusOf(jr, jp.path, 'fingerprint')).toBe('passed');
  });

  it('edited manifest counts: the part and the total that no longer add up', async () => {
    const d = copyOut(base.out, 'edited');
    const m = JSON.parse(readFileSync(join(d, 'manifest.json'), 'utf8')) as Manifest;
    m.output.parts[0]!.records += 1;
    m.output.parts[1]!.strata[0]! -= 1;
    writeFileSync(join(d, 'manifest.json'), JSON.stringify(m, null, 2));
    const r = await verify({ dir: d });
    const p0 = base.m.output.parts[0]!;
    const p1 = base.m.output.parts[1]!;
    expect(failed(r)).toEqual(['manifest.json output records', 'manifest.json strata totals', `${p0.path} records`, `${p1.path} strata`].sort());
    expect(r.mismatches.find((x) => x.file === p0.path)).toEqual({ file: p0.path, check: 'records', expected: p0.records + 1, found: p0.records });
    expect(r.mismatches.find((x) => x.file === p1.path)).toMatchObject({ expected: p1.strata[0]! - 1, found: p1.strata[0] });
    expect(runCli(['verify', d]).status).toBe(1);
  });

  it('edited statistics, and a changed value: named by column and figure', async () => {
    const { out, m: clean } = await run('stats-damage', { partitions: 3, stratify: 'fault', stats: true });
    const p0 = clean.output.parts[0]!;
    const p1 = clean.output.parts[1]!;
    type Summary = { name: string; mean: number | null; distinct: number };
    const d = copyOut(out, 'stats-edited');
    const m = JSON.parse(readFileSync(join(d, 'manifest.json'), 'utf8')) as Manifest;
    const mean = (p0.stats as Summary[]).find((c) => c.name === 'reading')!.mean!;
    (m.output.parts[0]!.stats as Summary[]).find((c) => c.name === 'reading')!.mean = mean + 1;
    const distinct = (clean.input.stats as Summary[]).find((c) => c.name === 'sensor')!.distinct;
    (m.input.stats as Summary[]).find((c) => c.name === 'sensor')!.distinct = distinct + 1;
    writeFileSync(join(d, 'manifest.json'), JSON.stringify(m, null, 2));
    const r = await verify({ dir: d });
    expect(failed(r)).toEqual(['manifest.json input statistics', `${p0.path} statistics`].sort());
    expect(r.mismatches.find((x) => x.file === p0.path)).toEqual({ file: p0.path, check: 'statistics', item: 'reading: mean', expected: JSON.stringify(mean + 1), found: JSON.stringify(mean) });
    expect(r.mismatches.find((x) => x.file === 'manifest.json')).toMatchObject({ item: 'sensor: distinct', expected: String(distinct + 1), found: String(distinct) });
    expect(runCli(['verify', d]).status).toBe(1);

    // One digit of a reading changed in a part (same size): its bytes, records and statistics.
    const e = copyOut(out, 'stats-value');
    const path = join(e, p1.path);
    const text = readFileSync(path, 'utf8');
    const at = text.search(/,-?\d+\.\d\d,/) + 1;
    const digit = text[at] === '1' ? '2' : '1';
    writeFileSync(path, text.slice(0, at) + digit + text.slice(at + 1));
    const v = await verify({ dir: e });
    expect(failed(v)).toEqual(['manifest.json input statistics', 'manifest.json output fingerprint', `${p1.path} fingerprint`, `${p1.path} sha256`, `${p1.path} statistics`].sort());
    expect(v.mismatches.find((x) => x.file === p1.path && x.check === 'statistics')!.item).toMatch(/^reading: /);
  });

  it('an edited maximum deviation, and one over the tolerance', async () => {
    const d = copyOut(base.out, 'edited-balance');
    const m = JSON.parse(readFileSync(join(d, 'manifest.json'), 'utf8')) as Manifest;
    m.balance.maxDeviation += 0.01;
    m.balance.tolerance = m.balance.maxDeviation / 2;
    writeFileSync(join(d, 'manifest.json'), JSON.stringify(m));
    const r = await verify({ dir: d });
    expect(failed(r)).toEqual(['manifest.json balance', 'manifest.json tolerance']);
    expect(r.mismatches[0]).toEqual({ file: 'manifest.json', check: 'balance', item: 'maxDeviation', expected: m.balance.maxDeviation, found: base.m.balance.maxDeviation });
  });

  it('--against an input that lost a record (extra in the output) or gained one (missing, with its input line)', async () => {
    const lines = inputText.split('\n');
    const k = lines.findIndex((l, i) => i > 50 && !l.includes('"'));
    const lost = join(dir, 'lost.csv');
    writeFileSync(lost, lines.filter((_, i) => i !== k).join('\n'));
    // The plain checks alone (a replay over other inputs fails too: test/safety.replay.test.ts).
    const r = await verify({ dir: base.out, against: [lost], replay: false });
    expect(failed(r)).toEqual(['(inputs) differences', '(inputs) input fingerprint', '(inputs) output fingerprint', `${lost} records`]);
    const extra = r.against!.differences!.listed;
    expect(extra.length).toBe(1);
    expect(extra[0]!.kind).toBe('extra');
    expect(extra[0]!.record).toBe(lines[k]);
    // Where the record sits in its part, found by searching the part's text.
    const partText = readFileSync(join(base.out, extra[0]!.file), 'utf8');
    expect(extra[0]!.line).toBe(lineAt(partText, partText.indexOf(`\n${lines[k]},`) + 1));

    const gained = join(dir, 'gained.csv');
    const added = '99999,S999,salt-flat,12.50,"new, unseen",ok';
    const g = [...lines];
    g.splice(1000, 0, added);
    writeFileSync(gained, g.join('\n'));
    const at = g.slice(0, 1000).join('\n').length + 1;
    const r2 = await verify({ dir: base.out, against: [gained], replay: false });
    expect(r2.against!.differences).toEqual({
      missing: 1,
      extra: 0,
      listed: [{ kind: 'missing', file: gained, line: lineAt(g.join('\n'), at), record: added, copies: { input: 1, output: 0 } }],
      listing: 'listed',
    });
    const cli = runCli(['verify', base.out, '--against', gained, '--json']);
    expect(cli.status).toBe(1);
    const json = JSON.parse(cli.stdout) as VerifyReport;
    expect(json.against!.differences!.listed[0]!.line).toBe(lineAt(g.join('\n'), at));
    expect(cli.stderr).toContain(`${gained}:${lineAt(g.join('\n'), at)}: missing from the output: ${added}`);
  });

  it('--against several inputs, and a gzip input', async () => {
    const { rows, header } = parseCsv(inputText);
    const quote = (f: string): string => (/[",\n\r]/.test(f) ? `"${f.replaceAll('"', '""')}"` : f);
    const toCsv = (rs: string[][]): string => [header, ...rs].map((r) => r.map(quote).join(',')).join('\n') + '\n';
    const a = join(dir, 'part-a.csv');
    const b = join(dir, 'part-b.csv.gz');
    writeFileSync(a, toCsv(rows.slice(0, 1200)));
    writeFileSync(b, gzipSync(toCsv(rows.slice(1200))));
    const { out, m } = await run('two-inputs', { inputs: [a, b], partitions: 2, stratify: 'fault' });
    const r = await verify({ dir: out, against: [a, b] });
    expect(r.mismatches).toEqual([]);
    expect(statusOf(r, a, 'records')).toBe('passed');
    expect(statusOf(r, b, 'records')).toBe('passed');
    expect(m.input.files.map((f) => f.records)).toEqual([1200, 1800]);
    // Both inputs after one --against, DIR first.
    expect(runCli(['verify', out, '--against', a, b]).status).toBe(0);
    // Only the first: the second's 1800 records are in the output but not in the inputs given.
    const r1 = await verify({ dir: out, against: [a] });
    expect([r1.against!.differences!.missing, r1.against!.differences!.extra]).toEqual([0, 1800]);
    expect(r1.against!.differences!.listed.length).toBe(20);
    // The same inputs in the other order: the order decides where records went, so it fails,
    // saying so and giving the manifest's order; the replay (which would fail for it) is skipped.
    const swapped = await verify({ dir: out, against: [b, a] });
    expect(swapped.ok).toBe(false);
    expect(swapped.mismatches).toEqual([
      { file: '(inputs)', check: 'input order', item: 'the order matters: give the inputs in the order the manifest lists them', expected: `${a} ${b}`, found: `${b} ${a}` },
    ]);
    expect(swapped.replay).toMatchObject({ status: 'skipped', note: `the inputs are given in another order than the manifest's (${a} ${b}), and the order decides where each record goes` });
    const cli = runCli(['verify', out, '--against', b, a]);
    expect(cli.status).toBe(1);
    expect(cli.stderr).toContain(`(inputs): input order (the order matters: give the inputs in the order the manifest lists them): expected ${a} ${b}, found ${b} ${a}`);
  });
});

describe('unusable folders and usage', () => {
  it('no manifest: RDK_MANIFEST naming the file and what to do; CLI exit 1', async () => {
    const empty = makeTempDir('rowdeck-verify-empty-');
    try {
      await expect(verify({ dir: empty })).rejects.toMatchObject({ code: 'RDK_MANIFEST', message: expect.stringContaining(join(empty, 'manifest.json')) });
      const cli = runCli(['verify', empty]);
      expect(cli.status).toBe(1);
      expect(cli.stderr).toMatch(/RDK_MANIFEST: .*manifest\.json: no such file\. Give the folder rowdeck shuffle wrote/);
      await expect(verify({ dir: join(empty, 'nope') })).rejects.toMatchObject({ code: 'RDK_MANIFEST', message: expect.stringContaining('no such folder') });
      // A file (the manifest itself, say) given as DIR: not a folder, rather than "no such folder".
      writeFileSync(join(empty, 'manifest.json'), '{}');
      await expect(verify({ dir: join(empty, 'manifest.json') })).rejects.toMatchObject({
        code: 'RDK_MANIFEST',
        message: `${join(empty, 'manifest.json')}: not a folder (a file). Give the folder rowdeck shuffle wrote its parts to (its --out), not one of its files.`,
      });
    } finally {
      removeDir(empty);
    }
  });

  it('a manifest that is not JSON, or lacks a field: RDK_MANIFEST naming the field', async () => {
    const { out } = await run('broken', { partitions: 2 });
    const path = join(out, 'manifest.json');
    const text = readFileSync(path, 'utf8');
    writeFileSync(path, text.slice(0, 100));
    await expect(verify({ dir: out })).rejects.toMatchObject({ code: 'RDK_MANIFEST', message: expect.stringContaining('not valid JSON') });
    const m = JSON.parse(text) as Record<string, Record<string, unknown>>;
    delete m.output!.fingerprint;
    writeFileSync(path, JSON.stringify(m));
    await expect(verify({ dir: out })).rejects.toMatchObject({ code: 'RDK_MANIFEST', message: expect.stringContaining('"output.fingerprint"') });
    (m.output!.parts as { path: string }[])[0]!.path = '../../elsewhere.csv';
    m.output!.fingerprint = '0'.repeat(16);
    writeFileSync(path, JSON.stringify(m));
    await expect(verify({ dir: out })).rejects.toMatchObject({ code: 'RDK_MANIFEST', message: expect.stringContaining('outside the output folder') });
  });

  it('no DIR is a usage error (exit 2); --help exits 0 and names every option', () => {
    expect(runCli(['verify']).status).toBe(2);
    expect(runCli(['verify', 'a', 'b']).status).toBe(2);
    const help = runCli(['verify', '--help']);
    expect(help.status).toBe(0);
    for (const o of ['--against', '--json', '--quiet']) expect(help.stdout).toContain(o);
  });
});

/** What the CLI must print for a report, one line per mismatch (the format the help promises). */
function formatExpected(r: VerifyReport): string[] {
  return r.mismatches.map((x) => `${x.file}${x.line !== undefined ? `:${x.line}` : ''}: ${x.check}${x.item !== undefined ? ` (${x.item})` : ''}: expected ${x.expected}, found ${x.found}`);
}
