// The benchmark harness's own parts (bench/lib): the order of a run, the figures kept from its
// samples, the copies that make the scale inputs, and what the measuring wrapper reads on this
// machine. No timing is asserted here: speed goals live in bench/.
import { mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
// @ts-expect-error: a plain ES module without types
import { concatCopies } from '../bench/lib/data.mjs';
// @ts-expect-error: a plain ES module without types
import { commandEnv, detectTools, freshWriteCost, measure, parseGnuTime, parseProcIo } from '../bench/lib/measure.mjs';
// @ts-expect-error: a plain ES module without types
import { median, schedule, summarize } from '../bench/lib/plan.mjs';
// @ts-expect-error: a plain ES module without types
import { budgetHolding, cases, GiB } from '../bench/cases.mjs';
// @ts-expect-error: a plain ES module without types
import { machineLine, mergeLatest, writeDocSection } from '../bench/lib/report.mjs';

const dir = mkdtempSync(join(tmpdir(), 'rowdeck-bench-harness-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

describe('the order of a run', () => {
  const cs = [{ name: 'a', rowdeck: () => [] }, { name: 'b' }, { name: 'c', rowdeck: () => [] }];
  const one = [{ label: 'A' }];
  const two = [{ label: 'A' }, { label: 'B' }];

  it('warms up every command once before any timed one, then alternates them round by round', () => {
    const { warmup, rounds } = schedule(cs, 3, one);
    expect(warmup.map((e: { name: string }) => e.name)).toEqual(['a', 'b', 'c']);
    expect(rounds.map((r: { name: string }[]) => r.map((e) => e.name).join(''))).toEqual(['abc', 'abc', 'abc']);
  });

  it('with two builds, runs both for rowdeck cases side by side, swapping which goes first each round', () => {
    const { warmup, rounds } = schedule(cs, 2, two);
    const show = (r: { name: string; build: string }[]) => r.map((e) => `${e.name}${e.build}`).join(' ');
    expect(show(warmup)).toBe('aA aB bA cA cB');
    expect(show(rounds[0]!)).toBe('aA aB bA cA cB');
    expect(show(rounds[1]!)).toBe('aB aA bA cB cA');
  });
});

describe('the figures of a case', () => {
  it('median of an odd and an even count (the mean of the two middle values), nulls left out', () => {
    expect(median([5, 1, 3])).toBe(3);
    expect(median([4, 1, 3, 2])).toBe(2.5);
    expect(median([null, 2, undefined])).toBe(2);
    expect(median([])).toBeNull();
  });

  it('keeps min, median and max of wall time, and the largest peak RSS of all runs', () => {
    const s = (wallS: number, peakRssMiB: number, writtenBytes: number) => ({ wallS, peakRssMiB, writtenBytes, userS: 1, sysS: 0.5 });
    const sum = summarize([s(3, 100, 10), s(1, 300, 10), s(2, 200, 12)], 2e9);
    expect(sum.wallS).toMatchObject({ min: 1, median: 2, max: 3 });
    expect(sum.peakRssMiB).toBe(300);
    expect(sum.writtenBytes).toBe(10);
    expect(sum.mbPerS).toBe(1000);
  });
});

describe('the scale inputs', () => {
  it('copies a CSV end to end with its header line once', () => {
    const src = join(dir, 'src.csv');
    writeFileSync(src, 'id,note\n1,"a\nb"\n2,c\n');
    const dest = join(dir, 'x3.csv');
    concatCopies(src, dest, 3);
    expect(readFileSync(dest, 'utf8')).toBe('id,note\n1,"a\nb"\n2,c\n1,"a\nb"\n2,c\n1,"a\nb"\n2,c\n');
  });

  it('adds the line end a file lacks between copies', () => {
    const src = join(dir, 'open.csv');
    writeFileSync(src, 'id\n1\n2');
    const dest = join(dir, 'open-x2.csv');
    concatCopies(src, dest, 2);
    expect(readFileSync(dest, 'utf8')).toBe('id\n1\n2\n1\n2');
  });

  it('names 1x, 4x and 8x cases at the default budget, at 64 MiB and at a budget holding the input', () => {
    const names = cases({ inputBytes: () => 1e9, root: '/r' })
      .filter((c: { groups: string[] }) => c.groups.includes('scale'))
      .map((c: { name: string }) => c.name);
    for (const m of [1, 4, 8]) for (const v of ['', '-mem64', '-fit']) expect(names).toContain(`rowdeck-${m}x${v}`);
    for (const m of [1, 4, 8]) expect(names).toContain(`shuf-${m}x`);
    // The budget holds twice the input, rounded up to a power of two GiB.
    expect(budgetHolding(1e9)).toBe(2 * GiB);
    expect(budgetHolding(4e9)).toBe(8 * GiB);
    expect(budgetHolding(1e8)).toBe(GiB);
  });
});

describe('where the results go', () => {
  it('replaces only the text between a group\'s markers, and appends a section where they are missing', () => {
    const doc = join(dir, 'doc.md');
    writeFileSync(doc, '# B\n\nbefore\n<!-- g:start -->\nold\n<!-- g:end -->\nafter\n');
    writeDocSection(doc, 'g', 'G', 'new');
    expect(readFileSync(doc, 'utf8')).toBe('# B\n\nbefore\n<!-- g:start -->\nnew\n<!-- g:end -->\nafter\n');
    writeDocSection(doc, 'h', 'H', 'more');
    expect(readFileSync(doc, 'utf8')).toBe('# B\n\nbefore\n<!-- g:start -->\nnew\n<!-- g:end -->\nafter\n\n## H\n\n<!-- h:start -->\nmore\n<!-- h:end -->\n');
  });

  it('keeps the other groups in latest.json, and a file of the one-run shape as the core group', () => {
    const path = join(dir, 'latest.json');
    writeFileSync(path, JSON.stringify({ machine: { commit: 'old' }, results: {} }));
    mergeLatest(path, 'scale', { runs: 3 });
    mergeLatest(path, 'scale', { runs: 2 });
    expect(JSON.parse(readFileSync(path, 'utf8'))).toEqual({ groups: { core: { machine: { commit: 'old' }, results: {} }, scale: { runs: 2 } } });
  });
});

describe('the machine line', () => {
  it('says what writing new pages cost at the start and the end of the run, from a probe that leaves no file', () => {
    const probeDir = mkdtempSync(join(dir, 'probe-'));
    const cost = freshWriteCost(probeDir, 8, 0);
    expect(cost).toBeGreaterThan(0);
    expect(readdirSync(probeDir)).toEqual([]);
    const m = { cpu: 'X', cores: 2, memoryGiB: 24, kernel: 'k', node: 'v20', builds: [{ label: 'A', commit: 'abc' }], commit: 'abc', date: '2026-12-05T00:00:00Z', loadAverage: [0.1, 0.2, 0.3] };
    expect(machineLine({ ...m, freshWrite: [0.25, 1.9] })).toMatch(/writing new pages \(a file in 1 MiB writes\): 0\.25 s\/GiB at the start, 1\.9 s\/GiB at the end$/);
    expect(machineLine(m)).not.toMatch(/new pages/);
    expect(machineLine({ ...m, leftOutEnv: ['NODE_EXTRA_CA_CERTS'] })).toMatch(/; commands run without NODE_EXTRA_CA_CERTS$/);
    expect(machineLine({ ...m, leftOutEnv: [] })).not.toMatch(/run without/);
  });
});

describe('the environment of measured commands', () => {
  it('leaves out NODE_EXTRA_CA_CERTS (read at every Node start) and keeps the rest', () => {
    const env = commandEnv({ NODE_EXTRA_CA_CERTS: '/etc/ssl/certs/x.crt', PATH: '/bin', LANG: 'C' });
    expect(env).toEqual({ PATH: '/bin', LANG: 'C' });
  });

  it('runs a command without it even when this process has it', () => {
    const before = process.env.NODE_EXTRA_CA_CERTS;
    process.env.NODE_EXTRA_CA_CERTS = '/nonexistent/ca.crt';
    try {
      const s = measure(['sh', '-c', 'test -z "${NODE_EXTRA_CA_CERTS+set}" && test -n "$PATH"'], { tools: detectTools(), scratch: dir, sync: false });
      expect(s.ok).toBe(true);
    } finally {
      if (before === undefined) delete process.env.NODE_EXTRA_CA_CERTS;
      else process.env.NODE_EXTRA_CA_CERTS = before;
    }
  });
});

describe('what the measuring wrapper reads', () => {
  it('parses /proc/PID/io and GNU time lines', () => {
    expect(parseProcIo('rchar: 5\nwchar: 7\nwrite_bytes: 4096\ncancelled_write_bytes: 0\n')).toMatchObject({ wchar: 7, write_bytes: 4096 });
    expect(parseProcIo('')).toBeNull();
    const t = parseGnuTime('Command exited with non-zero status 1\ngnutime 1.50 2.25 0.75 204800 16 0 900 3 4\n');
    expect(t).toMatchObject({ userS: 2.25, sysS: 0.75, peakRssMiB: 200, minorFaults: 900 });
  });

  const tools = detectTools();
  const itIo = tools.procIo ? it : it.skip;
  if (!tools.procIo) console.log('skip: bytes written need /proc/PID/io (Linux)');

  itIo('counts bytes written by worker threads of a child (its totals reach the waiting shell)', () => {
    const out = join(dir, 'written.bin');
    // A worker thread writes 3 MiB and ends; the main thread writes nothing.
    const inWorker = `require('node:fs').writeFileSync(${JSON.stringify(out)}, Buffer.alloc(3 << 20, 1))`;
    const script = `new (require('node:worker_threads').Worker)(${JSON.stringify(inWorker)}, { eval: true });`;
    const s = measure([process.execPath, '-e', script], { tools, scratch: dir, sync: false });
    expect(s.ok).toBe(true);
    expect(s.writeCallBytes).toBeGreaterThanOrEqual(3 << 20);
    expect(s.writtenBytes).toBeGreaterThanOrEqual(3 << 20);
    const idle = measure(['true'], { tools, scratch: dir, sync: false });
    expect(idle.writtenBytes).toBeLessThan(64 << 10);
  });

  const itTime = tools.gnuTime ? it : it.skip;
  if (!tools.gnuTime) console.log('skip: peak RSS needs GNU time (Debian: apt-get install time)');

  itTime('reads the peak RSS of a child that touches 200 MiB, and reports a failing command', () => {
    const s = measure([process.execPath, '-e', 'Buffer.alloc(200 << 20, 1)'], { tools, scratch: dir, sync: false });
    expect(s.peakRssMiB).toBeGreaterThanOrEqual(200);
    const bad = measure(['sh', '-c', 'echo nope >&2; exit 3'], { tools, scratch: dir, sync: false });
    expect(bad.ok).toBe(false);
    expect(bad.status).toBe(3);
    expect(bad.error).toContain('nope');
  });
});
