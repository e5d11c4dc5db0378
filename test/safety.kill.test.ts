/**
 * Runs killed at seeded random moments: SIGKILL, SIGINT, SIGTERM, SIGHUP and SIGQUIT in turn,
 * until 20 have landed inside a multi-stage run (worker threads, many buckets, stratified, with
 * folds). After every kill: no output folder that looks complete (the folder appears only by an
 * atomic rename, after its manifest; one killed after that rename is whole), the run died by the
 * signal it was sent, and, for the signals a process can catch, no work folder, lock or run record
 * left and one line saying what was removed. Then the
 * same command runs again into the same --out: it succeeds (taking over a killed run's lock and
 * removing its work folders, and saying so), and its bytes are identical to a run never killed.
 * The moments come from a fixed seed (mulberry32), spread over the length of an unkilled run.
 */
import { spawn } from 'node:child_process';
import { createHash } from 'node:crypto';
import { existsSync, readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createRandom, makeTempDir, removeDir } from './helpers/engine.js';
import { CLI, runRowdeck, workEntries } from './helpers/safety.js';

let dir: string;
let input: string;
const runs = (): string => join(dir, 'runs-registry');
const ARGS = ['--threads', '2', '--memory', '2MiB', '--stratify', 'fault', '--folds', '3', '--partitions', '4', '--seed', 'kill-test', '--quiet'];

/** An invented sensor log (classes sorted, as exports often are). */
function makeInput(rows: number): string {
  const rnd = createRandom(3);
  const faults = ['ok', 'ok', 'ok', 'drift', 'spike'];
  const lines = ['id,sensor,site,reading,note,fault'];
  for (let i = 0; i < rows; i++) lines.push(`${i},S${Math.floor(rnd() * 50)},site-${i % 4},${(rnd() * 100).toFixed(2)},${i % 9 === 0 ? '"gust, 40 km/h"' : 'routine'},${faults[Math.floor((i * 5) / rows)]}`);
  return lines.join('\n') + '\n';
}

/** sha256 of every file of an output, the manifest without its `run` section (time, host, timings). */
function digest(out: string): Record<string, string> {
  const d: Record<string, string> = {};
  for (const f of readdirSync(out).sort()) {
    let bytes = readFileSync(join(out, f));
    if (f === 'manifest.json') {
      const m = JSON.parse(bytes.toString('utf8')) as Record<string, unknown>;
      delete m.run;
      bytes = Buffer.from(JSON.stringify(m));
    }
    d[f] = createHash('sha256').update(bytes).digest('hex');
  }
  return d;
}

let reference: Record<string, string>;
/** How long an unkilled run works, from its first work folder to its end. */
let workMs = 0;

/**
 * Starts a run; once it has made its work folders (Node itself has started), waits `at(workMs)`
 * more and sends `signal` (none when `signal` is null); resolves when the process has ended.
 */
function startRun(out: string, signal: NodeJS.Signals | null, delayMs: number): Promise<{ status: number | null; signal: NodeJS.Signals | null; stderr: string; startedMs: number; workedMs: number }> {
  return new Promise((res, rej) => {
    const t0 = Date.now();
    const child = spawn(process.execPath, [CLI, 'shuffle', input, '--out', out, ...ARGS], { cwd: dir, env: { ...process.env, ROWDECK_RUNS_DIR: runs() }, stdio: ['ignore', 'ignore', 'pipe'] });
    let stderr = '';
    let started = -1;
    child.stderr.setEncoding('utf8').on('data', (t: string) => (stderr += t));
    child.on('error', rej);
    let timer: NodeJS.Timeout | null = null;
    const poll = setInterval(() => {
      if (started >= 0 || !readdirSync(dir).some((n) => n.startsWith(`.rowdeck-spill-${child.pid}-`))) return;
      started = Date.now();
      if (signal) timer = setTimeout(() => child.kill(signal), delayMs);
    }, 4);
    child.on('close', (status, sig) => {
      clearInterval(poll);
      if (timer) clearTimeout(timer);
      res({ status, signal: sig, stderr, startedMs: started < 0 ? -1 : started - t0, workedMs: started < 0 ? -1 : Date.now() - started });
    });
  });
}

beforeAll(async () => {
  dir = makeTempDir('rowdeck-kill-');
  input = join(dir, 'readings.csv');
  writeFileSync(input, makeInput(20_000));
  const r = await startRun(join(dir, 'ref'), null, 0);
  expect(r.status, r.stderr).toBe(0);
  expect(r.workedMs).toBeGreaterThan(0);
  workMs = r.workedMs;
  reference = digest(join(dir, 'ref'));
});
afterAll(() => removeDir(dir));

describe('kills at random moments', () => {
  it('20 kills inside runs (SIGKILL, SIGINT, SIGTERM, SIGHUP, SIGQUIT in turn): nothing complete-looking, cleanup where it can run, identical bytes on rerun', async () => {
    const rnd = createRandom(20_260_105);
    const signals: NodeJS.Signals[] = ['SIGKILL', 'SIGINT', 'SIGTERM', 'SIGHUP', 'SIGQUIT'];
    const out = join(dir, 'out');
    const tally = { kills: 0, killedMidRun: 0, killedAfterCommit: 0, finishedFirst: 0, cleanupLines: 0, takenOver: 0 };
    // Until 20 signals have landed inside a run (one that finished first does not count; at most 40 tries).
    for (let k = 0; tally.killedMidRun + tally.killedAfterCommit < 20 && k < 40; k++) {
      const signal = signals[k % signals.length]!;
      // Uniform over an unkilled run's work (both stages, the manifest and the rename).
      const delay = Math.floor(rnd() * workMs);
      const r = await startRun(out, signal, delay);
      tally.kills++;
      const what = `kill ${k}: ${signal} ${delay} ms into the work (an unkilled run works ${workMs} ms)\n${r.stderr}`;
      expect(r.stderr, what).not.toContain('internal error');
      if (r.status === 0) {
        // It finished before the signal: a whole, verified output.
        tally.finishedFirst++;
        expect(digest(out), what).toEqual(reference);
      } else if (existsSync(out)) {
        // Killed after its output was in place (while removing its spill): whole and identical.
        tally.killedAfterCommit++;
        expect(r.signal, what).toBe(signal);
        expect(digest(out), what).toEqual(reference);
      } else {
        tally.killedMidRun++;
        expect(r.signal, what).toBe(signal);
        // Nothing that looks complete: the folder appears only whole, so it is not there at all.
        const left = workEntries(dir);
        for (const w of left) expect(existsSync(join(dir, w, 'manifest.json')), what).toBe(false);
        if (signal !== 'SIGKILL') {
          expect(left, what).toEqual([]);
          expect(existsSync(runs()) ? readdirSync(runs()) : [], what).toEqual([]);
          // One line saying what was removed (the work folders had been made).
          const lines = r.stderr.split('\n').filter((l) => l.includes('stopped by'));
          expect(lines.length, what).toBe(1);
          tally.cleanupLines++;
          expect(lines[0], what).toMatch(new RegExp(`^rowdeck: stopped by ${signal}; removed .*\\.rowdeck-spill-`));
        }
      }
      // Again, to the end: the same bytes as a run never killed, nothing left over. On the calling
      // thread (--threads 0): quicker to start, and the bytes must not depend on the thread count.
      const hadLeftovers = workEntries(dir).length > 0;
      const existed = existsSync(out);
      const again = await runRowdeck(['shuffle', input, '--out', out, ...ARGS, '--threads', '0'], { cwd: dir, env: { ROWDECK_RUNS_DIR: runs() } });
      if (existed) {
        // The output from before is there: without --force the rerun refuses and changes nothing.
        expect(again.status, again.stderr).toBe(1);
        expect(again.stderr).toContain('RDK_OUTPUT_EXISTS');
      } else {
        expect(again.status, `${what}\nrerun: ${again.stderr}`).toBe(0);
        if (hadLeftovers) {
          tally.takenOver++;
          expect(again.stderr, what).toMatch(/rowdeck: (removed work folders left by runs that were killed|took over the lock of run \d+)/);
        }
      }
      expect(digest(out), what).toEqual(reference);
      expect(workEntries(dir), what).toEqual([]);
      rmSync(out, { recursive: true, force: true });
    }
    console.log(
      `kill test: ${tally.kills} signals sent over ${workMs} ms of work, ${tally.killedMidRun} mid-run (${tally.cleanupLines} printed what they removed), ${tally.killedAfterCommit} after the output was in place, ${tally.finishedFirst} finished first, ${tally.takenOver} reruns cleaned up after SIGKILL; every rerun identical to the reference`,
    );
    expect(tally.killedMidRun + tally.killedAfterCommit).toBeGreaterThanOrEqual(20);
    // Every signal landed during the work several times.
    expect(tally.killedMidRun).toBeGreaterThanOrEqual(15);
  }, 300_000);
});
