/**
 * The output folder: --force replaces only what rowdeck wrote, the final step never goes over
 * something that appeared meanwhile, an existing folder keeps its mode, group and setgid bit, a
 * new one follows the umask (as mkdir(2) does: mode 0777 & ~umask), spill stays private, and
 * what killed runs left (work folders, locks, an output half moved into place) is cleaned up by
 * the next run, wherever it is, and said.
 */
import { spawnSync } from 'node:child_process';
import { chmodSync, chownSync, existsSync, mkdirSync, readdirSync, readFileSync, statSync, utimesSync, writeFileSync } from 'node:fs';
import { hostname } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { shuffle } from '../src/engine/shuffle.js';
import { verify } from '../src/engine/verify.js';
import { makeSensorCsv, makeTempDir, removeDir } from './helpers/engine.js';
import { diffSnapshots, runProcess, runRowdeck, snapshot, workEntries, CLI } from './helpers/safety.js';
import { setFlag } from '../src/flags.js';

let dir: string;
let input: string;
let runs: string;
let restoreRuns: () => void;

beforeAll(() => {
  dir = makeTempDir('rowdeck-output-');
  input = join(dir, 'readings.csv');
  writeFileSync(input, makeSensorCsv({ rows: 3000, seed: 5 }));
  runs = join(dir, 'runs-registry');
  restoreRuns = setFlag('ROWDECK_RUNS_DIR', runs);
});
afterAll(() => {
  restoreRuns();
  removeDir(dir);
});

/** A process id that is certainly not running: a child that has ended. */
function deadPid(): number {
  const r = spawnSync(process.execPath, ['-e', 'process.stdout.write(String(process.pid))'], { encoding: 'utf8' });
  return Number(r.stdout);
}

function fresh(name: string): string {
  const d = join(dir, name);
  mkdirSync(d, { recursive: true });
  return d;
}

describe('--force replaces only what rowdeck wrote', () => {
  it('a previous output (splits, rejected records) is replaced by one of another layout; nothing of it stays', async () => {
    const d = fresh('replace');
    const out = join(d, 'out');
    const bad = join(d, 'with-bad.csv');
    writeFileSync(bad, readFileSync(input, 'utf8') + '1,2\n');
    await shuffle({ inputs: [bad], out, split: 'train=0.8,test=0.2', partitions: 2, onBadRecord: 'quarantine' });
    expect(readdirSync(out).sort()).toEqual(['manifest.json', 'rejected.csv', 'test', 'train']);
    const notes: string[] = [];
    await shuffle({ inputs: [input], out, partitions: 3, force: true, onNotice: (t) => notes.push(t) });
    expect(readdirSync(out).sort()).toEqual(['manifest.json', 'part-00000.csv', 'part-00001.csv', 'part-00002.csv']);
    expect((await verify({ dir: out })).ok).toBe(true);
    expect(workEntries(d)).toEqual([]);
  });

  it('a file the manifest does not list (hidden ones too) stops it, naming the file, and nothing is touched', async () => {
    const d = fresh('stranger');
    const out = join(d, 'out');
    await shuffle({ inputs: [input], out, partitions: 2 });
    writeFileSync(join(out, '.notes'), 'mine');
    const before = snapshot(d);
    await expect(shuffle({ inputs: [input], out, partitions: 3, force: true })).rejects.toMatchObject({ code: 'RDK_FORCE_REFUSED', message: expect.stringContaining('".notes"') });
    expect(diffSnapshots(before, snapshot(d))).toEqual([]);
  });

  it("rowdeck's report page is replaced with the output; a page of the user's under that name is not", async () => {
    const d = fresh('with-report');
    const out = join(d, 'out');
    await shuffle({ inputs: [input], out, partitions: 2, report: true });
    await shuffle({ inputs: [input], out, partitions: 3, force: true });
    expect(readdirSync(out).sort()).toEqual(['manifest.json', 'part-00000.csv', 'part-00001.csv', 'part-00002.csv']);
    writeFileSync(join(out, 'report.html'), '<!DOCTYPE html><title>my notes</title>');
    await expect(shuffle({ inputs: [input], out, force: true })).rejects.toMatchObject({ code: 'RDK_FORCE_REFUSED', message: expect.stringContaining('"report.html"') });
  });

  it('a failing run with --force leaves the previous output as it was', async () => {
    const d = fresh('force-fails');
    const out = join(d, 'out');
    await shuffle({ inputs: [input], out, partitions: 2 });
    const before = snapshot(d);
    const broken = join(dir, 'broken.csv');
    writeFileSync(broken, 'a,b\n1,2\n3\n');
    await expect(shuffle({ inputs: [broken], out, force: true })).rejects.toMatchObject({ code: 'RDK_FIELD_COUNT' });
    expect(diffSnapshots(before, snapshot(d))).toEqual([]);
  });

  it('the home folder is refused (the working folder: see the corpus)', async () => {
    const home = fresh('home');
    writeFileSync(join(home, 'dotfile'), 'x');
    const r = await runRowdeck(['shuffle', input, '--out', home, '--force'], { cwd: dir, env: { HOME: home } });
    expect(r.stderr).toMatch(/RDK_FORCE_REFUSED: .*home: --force is refused here: it is the home folder/);
    expect(readdirSync(home)).toEqual(['dotfile']);
  });
});

describe('the final step never replaces what appeared meanwhile', () => {
  it('a new --out made by someone else during the run: the run fails, theirs stays', async () => {
    const d = fresh('appeared');
    const out = join(d, 'out');
    const p = shuffle({
      inputs: [input],
      out,
      partitions: 2,
      onProgress: (e) => {
        if (e.stage === 'gather' && !existsSync(out)) {
          mkdirSync(out);
          writeFileSync(join(out, 'theirs.txt'), 'theirs');
        }
      },
    });
    await expect(p).rejects.toMatchObject({ code: 'RDK_OUTPUT_EXISTS', message: expect.stringContaining('while this run was working') });
    expect(readdirSync(out)).toEqual(['theirs.txt']);
    expect(workEntries(d)).toEqual([]);
  });

  it('a file written into an existing empty --out during the run: the run fails, nothing of it is moved in', async () => {
    const d = fresh('appeared-inside');
    const out = join(d, 'out');
    mkdirSync(out);
    const p = shuffle({
      inputs: [input],
      out,
      onProgress: (e) => {
        if (e.stage === 'gather' && !existsSync(join(out, 'theirs.txt'))) writeFileSync(join(out, 'theirs.txt'), 'theirs');
      },
    });
    await expect(p).rejects.toMatchObject({ code: 'RDK_OUTPUT_EXISTS', message: expect.stringContaining('"theirs.txt"') });
    expect(readdirSync(out)).toEqual(['theirs.txt']);
    expect(workEntries(d)).toEqual([]);
  });
});

describe('permissions', () => {
  it('a new output folder follows the umask, as mkdir does', async () => {
    for (const [umask, mode] of [
      ['027', 0o750],
      ['002', 0o775],
    ] as const) {
      const out = join(dir, `umask-${umask}`);
      const r = await runProcess('sh', ['-c', `umask ${umask} && exec "${process.execPath}" "${CLI}" shuffle "${input}" --out "${out}" --split a=0.5,b=0.5 --partitions 2 --quiet`], { cwd: dir });
      expect(r.status, r.stderr).toBe(0);
      expect(statSync(out).mode & 0o7777).toBe(mode);
      expect(statSync(join(out, 'a')).mode & 0o7777).toBe(mode);
      expect(statSync(join(out, 'manifest.json')).mode & 0o777).toBe(mode & 0o666);
    }
  });

  it('an existing empty folder keeps its mode, group and setgid bit; what is written in it takes the group', async () => {
    const out = fresh('shared');
    const groups = typeof process.getgroups === 'function' ? process.getgroups() : [];
    // Root may give it any group; another user one of its own groups other than its primary.
    const gid = process.getuid?.() === 0 ? 100 : groups.find((g) => g !== process.getgid?.());
    if (gid !== undefined) chownSync(out, -1, gid);
    chmodSync(out, 0o2770);
    const before = statSync(out);
    await shuffle({ inputs: [input], out, split: 'train=0.5,test=0.5', partitions: 2 });
    const after = statSync(out);
    expect(after.mode & 0o7777).toBe(0o2770);
    expect(after.gid).toBe(before.gid);
    expect(after.ino).toBe(before.ino);
    expect(statSync(join(out, 'train', 'part-00000.csv')).gid).toBe(before.gid);
    expect(statSync(join(out, 'train')).mode & 0o2000).toBe(0o2000);
    expect((await verify({ dir: out })).ok).toBe(true);
    if (gid === undefined) console.log('group part checked with the primary group only: this user has no other group');
  });

  it('the spill folder is private (0700) while the run works', async () => {
    const d = fresh('spill-mode');
    const modes: number[] = [];
    await shuffle({
      inputs: [input],
      out: join(d, 'out'),
      onProgress: (e) => {
        if (e.stage !== 'gather' || modes.length) return;
        for (const n of readdirSync(d)) if (n.startsWith('.rowdeck-spill-')) modes.push(statSync(join(d, n)).mode & 0o777);
      },
    });
    expect(modes).toEqual([0o700]);
  });
});

describe('what killed runs left', () => {
  it('stale work folders in --temp-dir are removed by the next run and listed', async () => {
    const d = fresh('stale-temp');
    const temp = fresh('stale-temp/spill');
    const pid = deadPid();
    const stale = join(temp, `.rowdeck-spill-${pid}-AbC123`);
    mkdirSync(stale);
    writeFileSync(join(stale, 'scatter-0000-00.spill'), 'x'.repeat(1000));
    const notes: string[] = [];
    await shuffle({ inputs: [input], out: join(d, 'out'), tempDir: temp, onNotice: (t) => notes.push(t) });
    expect(existsSync(stale)).toBe(false);
    expect(notes.join('\n')).toContain(stale);
  });

  it('folders of a killed run elsewhere are found through the record of runs; only its own names are removed', async () => {
    const d = fresh('stale-record');
    const elsewhere = fresh('stale-record/elsewhere');
    const pid = deadPid();
    const spill = join(elsewhere, `.rowdeck-spill-${pid}-ZzZ999`);
    const otherRun = join(elsewhere, `.rowdeck-spill-${pid + 1}-YyY888`);
    const userFile = join(elsewhere, 'field-notes.txt');
    mkdirSync(spill);
    mkdirSync(otherRun);
    writeFileSync(userFile, 'mine');
    mkdirSync(runs, { recursive: true, mode: 0o700 });
    writeFileSync(join(runs, `${hostname()}-${pid}.json`), JSON.stringify({ pid, host: hostname(), start: null, paths: [spill, otherRun, userFile] }));
    const notes: string[] = [];
    await shuffle({ inputs: [input], out: join(d, 'out'), onNotice: (t) => notes.push(t) });
    expect(existsSync(spill)).toBe(false);
    expect(existsSync(otherRun)).toBe(true); // another process id in its name: not that run's
    expect(readFileSync(userFile, 'utf8')).toBe('mine');
    expect(notes.join('\n')).toContain(spill);
    expect(readdirSync(runs)).toEqual([]);
  });

  it("a dead run's lock is taken over; a live run's, or one of another host, is not", async () => {
    const d = fresh('locks');
    const out = join(d, 'out');
    const lock = join(d, '.out.rowdeck-lock');
    const write = (c: object): void => writeFileSync(lock, JSON.stringify({ host: hostname(), start: null, startedAt: '2026-01-01T00:00:00.000Z', out, ...c }));
    write({ pid: process.pid });
    await expect(shuffle({ inputs: [input], out })).rejects.toMatchObject({ code: 'RDK_OUTPUT_LOCKED', details: { pid: process.pid } });
    write({ pid: 4242, host: 'another-machine' });
    await expect(shuffle({ inputs: [input], out })).rejects.toMatchObject({ code: 'RDK_OUTPUT_LOCKED', message: expect.stringContaining(`If no such run is going on another-machine, remove ${lock}`) });
    // Empty (a run killed while writing it): busy while young, taken over once old.
    writeFileSync(lock, '');
    await expect(shuffle({ inputs: [input], out })).rejects.toMatchObject({ code: 'RDK_OUTPUT_LOCKED' });
    utimesSync(lock, new Date(Date.now() - 60_000), new Date(Date.now() - 60_000));
    await shuffle({ inputs: [input], out });
    rmOut(out);
    const pid = deadPid();
    write({ pid });
    const notes: string[] = [];
    await shuffle({ inputs: [input], out, onNotice: (t) => notes.push(t) });
    expect(notes.join('\n')).toContain(`took over the lock of run ${pid}`);
    expect(existsSync(lock)).toBe(false);
    expect((await verify({ dir: out })).ok).toBe(true);
  });

  it('a run killed while moving its output into a folder: its files go, the output it replaced comes back', async () => {
    const d = fresh('half-moved');
    const out = join(d, 'out');
    await shuffle({ inputs: [input], out, partitions: 2 });
    const old = snapshot(out);
    // What a run killed halfway through its final moves (with --force) leaves: the old output
    // aside in its work folder, some new files in place, no manifest, and its lock.
    const pid = deadPid();
    const aside = join(out, `.rowdeck-partial-${pid}-0a0b0c0d-replaced`);
    mkdirSync(aside);
    for (const f of readdirSync(out)) if (!f.startsWith('.')) writeFileSync(join(aside, f), readFileSync(join(out, f)));
    for (const f of readdirSync(aside)) if (f !== 'part-00000.csv') rmFile(join(out, f));
    writeFileSync(join(out, 'part-00000.csv'), 'id\nnew\n');
    writeFileSync(join(out, 'part-00002.csv'), 'id\nnew\n');
    writeFileSync(join(d, '.out.rowdeck-lock'), JSON.stringify({ pid, host: hostname(), start: null, startedAt: 'x', out, finishing: ['part-00000.csv', 'part-00001.csv', 'part-00002.csv', 'manifest.json'] }));
    const notes: string[] = [];
    await expect(shuffle({ inputs: [input], out, onNotice: (t) => notes.push(t) })).rejects.toMatchObject({ code: 'RDK_OUTPUT_EXISTS' });
    expect(notes.join('\n')).toMatch(/took over the lock of run \d+, which ended without releasing it, removed the 2 file\(s\) of its unfinished output, put back the 3 file\(s\) of the output it was replacing/);
    expect(diffSnapshots(old, snapshot(out))).toEqual([]);
    expect((await verify({ dir: out })).ok).toBe(true);
  });
});

function rmOut(out: string): void {
  spawnSync('rm', ['-rf', out]);
}

function rmFile(p: string): void {
  spawnSync('rm', ['-f', p]);
}
