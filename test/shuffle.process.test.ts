/**
 * Whole-process behaviour: an interrupted run leaves nothing that looks complete, and memory
 * stays bounded as the input grows. Runs the built CLI / library in child processes.
 */
import { spawn, spawnSync } from 'node:child_process';
import { existsSync, readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { makeSensorCsv, makeTempDir, removeDir } from './helpers/engine.js';

const CLI = resolve('dist/cli/main.cjs');
const INDEX = resolve('dist/index.js');
let dir: string;
let big: string;

beforeAll(() => {
  dir = makeTempDir();
  big = join(dir, 'big.csv');
  // ~24 MB, large enough that a run takes a while at a small memory budget.
  writeFileSync(big, makeSensorCsv({ rows: 500_000, seed: 2 }));
});
afterAll(() => removeDir(dir));

function hidden(d: string): string[] {
  return readdirSync(d).filter((f) => f.startsWith('.rowdeck-'));
}

/** Starts a shuffle and sends `signal` once `ready()` holds (polled every 5 ms). */
async function interrupt(out: string, signal: NodeJS.Signals, ready: () => boolean, extra: string[] = []): Promise<number | null> {
  const child = spawn(process.execPath, [CLI, 'shuffle', big, '--out', out, '--memory', '4MiB', '--partitions', '4', '--stratify', 'fault', '--quiet', ...extra], {
    stdio: 'ignore',
  });
  const exited = new Promise<number | null>((res) => child.on('exit', (code, sig) => res(sig ? -1 : code)));
  for (let i = 0; i < 4000 && child.exitCode === null; i++) {
    if (ready()) break;
    await new Promise((r) => setTimeout(r, 5));
  }
  child.kill(signal);
  return exited;
}

const spillStarted = (): boolean => hidden(dir).some((f) => f.startsWith('.rowdeck-spill-'));
/** Entries of a folder; none for what is not one (the lock is written aside under the stage prefix first, as a file). */
function entriesOf(d: string): string[] {
  try {
    return readdirSync(d);
  } catch {
    return [];
  }
}
const gatherStarted = (): boolean => hidden(dir).some((f) => f.startsWith('.rowdeck-partial-') && entriesOf(join(dir, f)).some((p) => p.startsWith('part-')));

describe('an interrupted run', () => {
  // The input (~24 MB) is shuffled on the main thread by default; --threads 2 uses workers.
  it.each([
    ['SIGTERM', 'scatter', 'the main thread', spillStarted, []],
    ['SIGINT', 'gather', 'the main thread', gatherStarted, []],
    ['SIGTERM', 'scatter', 'worker threads', spillStarted, ['--threads', '2']],
    ['SIGINT', 'gather', 'worker threads', gatherStarted, ['--threads', '2']],
  ] as const)('%s during %s on %s leaves no output folder and no work folders', async (signal, stage, _on, ready, extra) => {
    const out = join(dir, `killed-${signal}-${stage}-${extra.length}`);
    const code = await interrupt(out, signal, ready, [...extra]);
    expect(code).not.toBe(0);
    expect(existsSync(out)).toBe(false);
    expect(hidden(dir)).toEqual([]);
  });

  it('SIGKILL cannot clean up, but nothing looks complete and the next run removes the leftovers', async () => {
    const out = join(dir, 'killed-hard');
    await interrupt(out, 'SIGKILL', gatherStarted);
    expect(existsSync(out)).toBe(false);
    const left = hidden(dir);
    expect(left.length).toBeGreaterThan(0);
    expect(left.every((f) => !existsSync(join(dir, f, 'manifest.json')))).toBe(true);
    const small = join(dir, 'small.csv');
    writeFileSync(small, makeSensorCsv({ rows: 100, seed: 1 }));
    const r = spawnSync(process.execPath, [CLI, 'shuffle', small, '--out', join(dir, 'after'), '--quiet']);
    expect(r.status).toBe(0);
    expect(hidden(dir)).toEqual([]);
  });
});

describe('Node flags', () => {
  // A V8 flag such as --max-old-space-size cannot be handed to a worker explicitly
  // (ERR_WORKER_INVALID_EXEC_ARGV); it used to stop every run on worker threads.
  it('a run on worker threads starts under V8 flags, from the CLI and from an inline module script', () => {
    const small = join(dir, 'flags.csv');
    writeFileSync(small, makeSensorCsv({ rows: 2000, seed: 3 }));
    const cli = spawnSync(process.execPath, ['--max-old-space-size=2048', CLI, 'shuffle', small, '--out', join(dir, 'flags-cli'), '--threads', '2', '--quiet'], { encoding: 'utf8' });
    expect(cli.status, cli.stderr).toBe(0);
    const script = `
      const { shuffle } = await import(${JSON.stringify(INDEX)});
      const m = await shuffle({ inputs: [${JSON.stringify(small)}], out: ${JSON.stringify(join(dir, 'flags-lib'))}, threads: 2 });
      process.stdout.write(String(m.run.threads));`;
    const lib = spawnSync(process.execPath, ['--input-type=module', '--max-old-space-size=2048', '-e', script], { encoding: 'utf8' });
    expect(lib.status, lib.stderr).toBe(0);
    expect(lib.stdout).toBe('2');
  });
});

describe('memory', () => {
  /** Peak RSS (KiB) of a child process shuffling `input` with `memory`. */
  function peakRss(input: string, memory: string): number {
    const script = `
      const { shuffle } = await import(${JSON.stringify(INDEX)});
      await shuffle({ inputs: [${JSON.stringify(input)}], out: ${JSON.stringify(join(dir, 'rss-' + memory))}, memory: ${JSON.stringify(memory)},
        partitions: 4, stratify: 'fault', force: true, threads: 2 });
      process.stdout.write(String(process.resourceUsage().maxRSS));`;
    const r = spawnSync(process.execPath, ['--input-type=module', '-e', script], { encoding: 'utf8' });
    expect(r.status, r.stderr).toBe(0);
    return Number(r.stdout);
  }

  /**
   * Peak RSS (KiB) of the CLI shuffling `input` at `memory` on two threads: the largest the
   * process's resident memory was (getrusage's ru_maxrss, as GNU time's %M), read as it exits.
   */
  function cliPeakRss(input: string, memory: string, env: Record<string, string> = {}): { kib: number; layout: string } {
    const preload = join(dir, 'peak-rss.cjs');
    writeFileSync(preload, `process.on('exit', () => process.stderr.write('peak-rss ' + process.resourceUsage().maxRSS + '\\n'));\n`);
    const out = join(dir, `cli-rss-${memory}`);
    const r = spawnSync(process.execPath, ['--require', preload, CLI, 'shuffle', input, '--out', out, '--memory', memory, '--partitions', '4', '--stratify', 'fault', '--threads', '2', '--force', '--json', '--quiet'], { encoding: 'utf8', maxBuffer: 64 << 20, env: { ...process.env, ...env } });
    expect(r.status, r.stderr).toBe(0);
    const kib = Number(/peak-rss (\d+)/.exec(r.stderr)?.[1]);
    expect(kib).toBeGreaterThan(0);
    return { kib, layout: (JSON.parse(r.stdout) as { run: { layout: string } }).run.layout };
  }

  it('the CLI at a small budget: 4x the input (multi-pass, every bucket split) adds little, within the budget + 150 MiB', () => {
    // big.csv (~24 MB) four times over, the header once: ~96 MB, a spill of ~30x the 4 MiB budget.
    const text = readFileSync(big, 'utf8');
    const body = text.slice(text.indexOf('\n') + 1);
    const four = join(dir, 'big-x4.csv');
    writeFileSync(four, text + body + body + body);
    const one = cliPeakRss(big, '4MiB');
    const four4 = cliPeakRss(four, '4MiB');
    // One bucket of all 96 MB (ROWDECK_BUCKET_BITS=0): split into sub-buckets as any bucket too
    // large for stage 2 (without the split, stage 2 held it whole: +274 MiB on the development machine).
    const whole = cliPeakRss(four, '4MiB', { ROWDECK_BUCKET_BITS: '0' });
    expect([one.layout, four4.layout, whole.layout]).toEqual(['multi-pass', 'multi-pass', 'multi-pass']);
    // Measured on the development machine: 1x ~120 MiB, 4x ~+6 MiB, one bucket ~+20-24 MiB (its
    // sub-buckets' buffers); the goal is the budget (4 MiB) + 150 MiB. Without the split: +274 MiB.
    for (const r of [four4, whole]) {
      expect(r.kib - one.kib).toBeLessThan(32 * 1024);
      expect(r.kib).toBeLessThan((4 + 150) * 1024);
    }
    rmSync(four);
  });

  it('does not grow with the input: 10x the input at the same budget adds little', () => {
    const small = join(dir, 'mem-small.csv');
    writeFileSync(small, makeSensorCsv({ rows: 50_000, seed: 2 }));
    // big.csv is 10x mem-small.csv and ~6x the 4 MiB budget.
    const a = peakRss(small, '4MiB');
    const b = peakRss(big, '4MiB');
    // Measured on the development machine: about +20 MiB (allocator and collector slack).
    expect(b - a).toBeLessThan(48 * 1024);
  });
});
