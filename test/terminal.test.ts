/**
 * What people see on a terminal: the table after `shuffle` (a pure function of the manifest and
 * the width, then the CLI with a stderr that says it is a terminal), the checks `verify` lists,
 * and the progress line (gzip measured in compressed bytes, no bar without a total, at most ten
 * redraws a second). Counts and deviations in the table are read back and compared with the
 * manifest, worked out here from its counts.
 */
import { execFileSync, spawn } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { gzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { runShuffle } from '../src/engine/shuffle.js';
import { verify } from '../src/engine/verify.js';
import { profile, type ProfileProgress } from '../src/engine/profile.js';
import type { Manifest } from '../src/engine/manifest.js';
import type { ProgressEvent } from '../src/options.js';
import { runCli, type CliIO } from '../src/cli/main.js';
import { formatShuffleSummary, formatVerifyChecks, SUMMARY_ROWS } from '../src/cli/summary.js';
import { createProgress, formatProgress, REDRAW_MS } from '../src/cli/progress.js';

let dir: string;
let folds: Manifest;
let many: Manifest;
let plain: Manifest;

function readings(n: number): string {
  const faults = ['none', 'none', 'none', 'drift', 'spike', 'overheat'];
  const rows = ['reading_id,sensor_id,fault,temp_c'];
  for (let i = 0; i < n; i++) rows.push(`${i},FS-${String(i % 9).padStart(3, '0')},${faults[(i * 7) % 6]},${((i * 37) % 90) / 3}`);
  return rows.join('\n') + '\n';
}

/** A stderr that says it is a terminal of `columns` columns, and keeps what is written. */
function terminal(columns: number, isTTY = true): { io: CliIO; err: () => string; out: () => string } {
  let err = '';
  let out = '';
  const io = {
    stdout: { isTTY, write: (s: string) => ((out += s), true) },
    stderr: { isTTY, columns, write: (s: string) => ((err += s), true) },
  } as unknown as CliIO;
  return { io, err: () => err, out: () => out };
}

/** Signed relative deviation, from the definition in docs/manifest.md. */
function dev(n: number, unit: number, cls: number, total: number): number {
  return (n / unit - cls / total) / (cls / total);
}

beforeAll(async () => {
  dir = mkdtempSync(join(tmpdir(), 'rowdeck-terminal-'));
  writeFileSync(join(dir, 'r.csv'), readings(600));
  folds = (await runShuffle({ inputs: [join(dir, 'r.csv')], out: join(dir, 'folds'), partitions: 3, folds: 4, stratify: 'fault', seed: 'tty', threads: 0 })).manifest;
  plain = (await runShuffle({ inputs: [join(dir, 'r.csv')], out: join(dir, 'plain'), partitions: 3, seed: 'tty', threads: 0 })).manifest;
  const rows = ['id,kind'];
  for (let c = 0; c < 40; c++) for (let k = 0; k < 160 - 3 * c; k++) rows.push(`${rows.length},kind-${String(c).padStart(2, '0')}`);
  writeFileSync(join(dir, 'many.csv'), rows.join('\n') + '\n');
  many = (await runShuffle({ inputs: [join(dir, 'many.csv')], out: join(dir, 'many'), partitions: 64, stratify: 'kind', tolerance: 10, seed: 'tty', threads: 0 })).manifest;
});
afterAll(() => {
  if (dir) rmSync(dir, { recursive: true, force: true });
});

/** The table's rows: label, then (count, deviation) per column. */
function readTable(lines: string[]): { head: string; rows: Map<string, { count: number; dev: string }[]> } {
  const start = lines.findIndex((l) => l.startsWith('class mix by'));
  const rows = new Map<string, { count: number; dev: string }[]>();
  for (const l of lines.slice(start + 2)) {
    const m = /^(\S+(?: \d+)?)\s+(.*)$/.exec(l);
    if (!m || !/^\d/.test(m[2]!)) continue;
    const cells = [...m[2]!.matchAll(/([\d,]+) (\S+)/g)].map((x) => ({ count: Number(x[1]!.replace(/,/g, '')), dev: x[2]! }));
    rows.set(m[1]!, cells);
  }
  return { head: lines[start + 1]!, rows };
}

describe('the summary after shuffle', () => {
  it('a wide terminal: every class, each count and deviation as the manifest has it, the largest marked once', () => {
    const lines = formatShuffleSummary(folds, { width: 160, out: 'folds', report: null, table: true });
    expect(lines[0]).toMatch(/^rowdeck: 600 records -> 3 part\(s\) in folds \(.*max class deviation \d+\.\d\d%\)\.$/);
    const { head, rows } = readTable(lines);
    const names = folds.strata.values.map((v) => v.value![0]!);
    for (const n of names) expect(head).toContain(n);
    const total = folds.input.records;
    folds.output.parts.forEach((p) => {
      const cells = rows.get(p.path)!;
      expect(cells.map((c) => c.count)).toEqual(p.strata);
      cells.forEach((c, s) => {
        const want = dev(p.strata[s]!, p.records, folds.strata.values[s]!.records, total);
        expect(Math.abs(Number(c.dev.replace(/[%*]/g, '')) / 100 - want)).toBeLessThanOrEqual(0.00005 + 1e-12);
      });
    });
    for (let k = 0; k < 4; k++) expect(rows.get(`fold ${k}`)).toBeDefined();
    const marked = lines.join('\n').match(/\*/g) ?? [];
    expect(marked.length).toBe(2); // the mark and its legend "(* the largest)"
    const markedLine = lines.find((l) => /\d%\*/.test(l))!;
    // The marked cell is the largest |deviation| over parts and folds.
    const cells = [...rows.values()].flat().map((c) => Math.abs(Number(c.dev.replace(/[%*]/g, ''))));
    expect(Number(/([+-]\d+\.\d+)%\*/.exec(markedLine)![1]!.replace('+', '')) ** 2).toBeCloseTo(Math.max(...cells) ** 2, 6);
    expect(Math.abs(Number(/([+-]\d+\.\d+)%\*/.exec(markedLine)![1]!)) / 100).toBeCloseTo(folds.balance.maxDeviation, 4);
  });

  it('a narrow terminal folds the smaller classes into "other", keeping the worst', () => {
    const lines = formatShuffleSummary(many, { width: 80, out: 'many', report: null, table: true });
    // The headline names the folder and may run on; the table keeps to the width.
    for (const l of lines.slice(1)) expect([...l].length, l).toBeLessThanOrEqual(80);
    const { head, rows } = readTable(lines);
    expect(head).toMatch(/\d+ other/);
    const worstClass = many.strata.values[many.balance.worst!.stratum]!.value![0]!;
    expect(head).toContain(worstClass.slice(0, 6));
    // Rows: at most SUMMARY_ROWS parts, then a line for the rest.
    expect(rows.size).toBeLessThanOrEqual(SUMMARY_ROWS + 1);
    expect(lines.some((l) => l.startsWith(`… ${64 - SUMMARY_ROWS} more parts`))).toBe(true);
    // The "other" count of a part is the sum of its classes not shown.
    const part = many.output.parts.find((p) => rows.has(p.path))!;
    const cells = rows.get(part.path)!;
    expect(cells.reduce((a, c) => a + c.count, 0)).toBe(part.records);
  });

  it('without --stratify: sizes only, no class deviation anywhere', () => {
    const lines = formatShuffleSummary(plain, { width: 100, out: 'plain', report: 'plain/report.html', table: true });
    const text = lines.join('\n');
    expect(text).not.toMatch(/deviation/);
    expect(text).toContain('not stratified');
    plain.output.parts.forEach((p) => expect(text).toMatch(new RegExp(`${p.path.replace('.', '\\.')}\\s+${p.records}\\s+33\\.3%`)));
    expect(lines[lines.length - 1]).toBe('rowdeck: report: plain/report.html');
  });

  it('not a terminal: the one line', () => {
    expect(formatShuffleSummary(folds, { width: 80, out: 'folds', report: null, table: false })).toHaveLength(1);
  });
});

describe('the CLI on a terminal (stderr with isTTY)', () => {
  it('shuffle prints the table and where the report is', async () => {
    const t = terminal(120);
    const code = await runCli(['shuffle', join(dir, 'r.csv'), '--out', join(dir, 'cli-a'), '--partitions', '2', '--stratify', 'fault', '--seed', 'cli', '--report', '--threads', '0'], t.io);
    expect(code, t.err()).toBe(0);
    const lines = t.err().split('\n');
    expect(lines.some((l) => l.startsWith('class mix by fault'))).toBe(true);
    expect(lines).toContain(`rowdeck: report: ${join(dir, 'cli-a', 'report.html')}`);
    expect(readFileSync(join(dir, 'cli-a', 'report.html'), 'utf8')).toContain('<!DOCTYPE html>');
  });

  it('--quiet prints nothing; --json keeps the one line; a pipe gets the one line', async () => {
    const q = terminal(120);
    expect(await runCli(['shuffle', join(dir, 'r.csv'), '--out', join(dir, 'cli-q'), '--stratify', 'fault', '--quiet', '--threads', '0'], q.io)).toBe(0);
    expect(q.err()).toBe('');
    const j = terminal(120);
    expect(await runCli(['shuffle', join(dir, 'r.csv'), '--out', join(dir, 'cli-j'), '--stratify', 'fault', '--json', '--threads', '0'], j.io)).toBe(0);
    expect(j.err().trim().split('\n')).toHaveLength(1);
    const p = terminal(120, false);
    expect(await runCli(['shuffle', join(dir, 'r.csv'), '--out', join(dir, 'cli-p'), '--stratify', 'fault', '--threads', '0'], p.io)).toBe(0);
    expect(p.err().trim().split('\n')).toHaveLength(1);
  });

  it('verify lists which checks ran on which files', async () => {
    const t = terminal(200);
    expect(await runCli(['verify', join(dir, 'folds')], t.io)).toBe(0);
    const err = t.err();
    const files = folds.output.parts.map((p) => p.path).join(', ');
    expect(err).toMatch(new RegExp(`passed\\s+present, bytes, sha256, readable, header, records, strata, fold values, folds, fold strata, fingerprint  on ${files.replaceAll('.', '\\.')}`));
    expect(err).toMatch(/passed\s+output records, .*balance.* on manifest\.json/);
    const report = await verify({ dir: join(dir, 'folds') });
    expect(formatVerifyChecks(report, 200)[0]).toBe(`checks: ${report.checks.length} passed, 0 failed, 0 skipped:`);
  });

  it('report writes the page and prints its path', async () => {
    const t = terminal(100);
    expect(await runCli(['report', join(dir, 'folds'), '--verify'], t.io)).toBe(0);
    expect(t.out()).toBe(`${join(dir, 'folds', 'report.html')}\n`);
    expect(t.err()).toMatch(/verify passed \(\d+ checks\)/);
    const missing = terminal(100);
    expect(await runCli(['report', join(dir, 'nowhere')], missing.io)).toBe(1);
    expect(missing.err()).toContain('RDK_MANIFEST');
    const usage = terminal(100);
    expect(await runCli(['report'], usage.io)).toBe(2);
    const help = terminal(100);
    expect(await runCli(['report', '--help'], help.io)).toBe(0);
    expect(help.out()).toMatch(/Examples:\n {2}rowdeck report parts\n/);
  });
});

describe('progress', () => {
  const event = (e: Partial<ProgressEvent>): ProgressEvent => ({ stage: 'scatter', done: 0, total: 0, records: 0, elapsedMs: 1000, ...e });

  it('with a total: a bar; without one (stdin, a pipe): bytes and records, no bar', () => {
    expect(formatProgress(event({ done: 5e6, total: 10e6, records: 1234 }))).toMatch(/^scatter \[#{12}\.{12}\] 5\.0 MB\/10 MB 1,234 records 5 MB\/s ETA 1s$/);
    const open = formatProgress(event({ done: 12_300_000, total: 0, records: 4567 }));
    expect(open).toBe('scatter 12 MB read, 4,567 records 12 MB/s');
    expect(open).not.toContain('[');
  });

  it('redraws at most ten times a second, whatever the events', () => {
    let clock = 0;
    const writes: string[] = [];
    const p = createProgress({ isTTY: true, write: (s: string) => (writes.push(s), true) } as unknown as NodeJS.WritableStream, true, () => clock);
    // 3 seconds of events every 1.6 ms (about what gzip input sent): 1,875 events.
    // Half of them past the total, as gzip's uncompressed counts over the compressed size were.
    for (clock = 0; clock < 3000; clock += 1.6) p.update(event({ done: clock * 2, total: 3000 }));
    expect(writes.length).toBeLessThanOrEqual(3000 / REDRAW_MS + 1);
    expect(writes.length).toBeGreaterThanOrEqual(3000 / REDRAW_MS - 1);
  });

  it('not a terminal: silent', () => {
    const writes: string[] = [];
    const p = createProgress({ isTTY: false, write: (s: string) => (writes.push(s), true) } as unknown as NodeJS.WritableStream, true);
    p.update(event({ done: 1, total: 2 }));
    p.done();
    expect(writes).toEqual([]);
  });

  it('gzip input: the bar measures compressed bytes, ending at the file size', async () => {
    const text = readings(20000);
    const gz = join(dir, 'r.csv.gz');
    writeFileSync(gz, gzipSync(Buffer.from(text)));
    const size = statSync(gz).size;
    const events: ProgressEvent[] = [];
    const run = await runShuffle({ inputs: [gz], out: join(dir, 'gz'), partitions: 2, seed: 'gz', threads: 0, onProgress: (e) => void (e.stage === 'scatter' && events.push({ ...e })) });
    expect(events.length).toBeGreaterThan(0);
    for (const e of events) {
      expect(e.total).toBe(size);
      expect(e.done).toBeLessThanOrEqual(size);
    }
    expect(events[events.length - 1]!.done).toBe(size);
    // The manifest still counts the bytes read after decompression.
    expect(run.manifest.input.files[0]!.bytes).toBe(Buffer.byteLength(text));
    expect(Buffer.byteLength(text)).toBeGreaterThan(3 * size);
  });

  it('gzip input to profile: the same, compressed bytes up to the file size', async () => {
    const gz = join(dir, 'r.csv.gz');
    const size = statSync(gz).size;
    const events: ProfileProgress[] = [];
    const p = await profile({ inputs: [gz], threads: 0, onProgress: (e) => void (e.stage === 'read' && events.push({ ...e })) });
    expect(events.length).toBeGreaterThan(0);
    for (const e of events) expect(e.done).toBeLessThanOrEqual(e.total);
    expect(events[events.length - 1]!.done).toBe(size);
    expect(p.inputs[0]!.bytes).toBeGreaterThan(3 * size);
  });

  it('a pipe: no total, bytes and records counted as they come', async () => {
    const src = join(dir, 'pipe-src.csv');
    writeFileSync(src, readings(3000));
    const fifo = join(dir, 'pipe.csv');
    execFileSync('mkfifo', [fifo]);
    const writer = spawn('sh', ['-c', `cat "${src}" > "${fifo}"`], { stdio: 'ignore' });
    const events: ProgressEvent[] = [];
    try {
      await runShuffle({ inputs: [fifo], out: join(dir, 'piped'), partitions: 2, seed: 'pipe', threads: 0, onProgress: (e) => void (e.stage === 'scatter' && events.push({ ...e })) });
    } finally {
      writer.kill();
    }
    expect(events.every((e) => e.total === 0)).toBe(true);
    const last = events[events.length - 1]!;
    expect(last.done).toBe(statSync(src).size);
    expect(last.records).toBe(3000);
    expect(formatProgress(last)).toMatch(/^scatter \d+ kB read, 3,000 records/);
  });
});
