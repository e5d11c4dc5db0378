/**
 * A plan run by a real Slurm cluster: WORK/slurm.sh submits the stages as array jobs chained by
 * afterok, the jobs run, and the output is byte for byte that of `shuffle`, in three modes.
 *
 * Needs a running one-node cluster: as root, `apt-get install -y slurm-wlm munge` and
 * `scripts/slurm-local.sh start` (.ci/run does both). Without one the tests are skipped, saying so.
 */
import { execFileSync, spawnSync } from 'node:child_process';
import { existsSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { gzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { makeSensorCsv, makeTempDir, removeDir } from './helpers/engine.js';
import { manifestBody, readPlan, rowdeck } from './helpers/cluster.js';

const slurmUp = ((): boolean => {
  if (spawnSync('sh', ['-c', 'command -v sbatch'], { encoding: 'utf8' }).status !== 0) return false;
  const r = spawnSync('sinfo', ['-h', '-o', '%t'], { encoding: 'utf8', timeout: 10_000 });
  return r.status === 0 && /idle|mix|alloc/.test(r.stdout);
})();
if (!slurmUp) {
  console.log('cluster.slurm.test.ts skipped: no running Slurm here. To run it (as root): apt-get install -y slurm-wlm munge && scripts/slurm-local.sh start');
}

let dir: string;
let input: string;
let gz: string;
beforeAll(() => {
  dir = makeTempDir();
  input = join(dir, 'readings.csv');
  writeFileSync(input, makeSensorCsv({ rows: 80000, seed: 41, sensors: 200 }));
  gz = join(dir, 'more.csv.gz');
  writeFileSync(gz, gzipSync(makeSensorCsv({ rows: 4000, seed: 42, sensors: 200 })));
});
afterAll(() => removeDir(dir));

/** Waits until none of the jobs is queued or running; returns each job's final states (from scontrol). */
async function waitForJobs(ids: string[], timeoutMs: number): Promise<string[]> {
  const deadline = Date.now() + timeoutMs;
  for (;;) {
    const q = spawnSync('squeue', ['-h', '-j', ids.join(','), '-o', '%i %T'], { encoding: 'utf8' });
    if (q.stdout.trim() === '') break;
    if (Date.now() > deadline) throw new Error(`Slurm jobs still queued after ${timeoutMs} ms:\n${q.stdout}`);
    await new Promise((r) => setTimeout(r, 1000));
  }
  return ids.flatMap((id) => {
    const r = spawnSync('scontrol', ['show', 'job', id], { encoding: 'utf8' });
    return [...r.stdout.matchAll(/JobState=(\S+)/g)].map((m) => m[1]!);
  });
}

describe.skipIf(!slurmUp)('a plan under Slurm', () => {
  const modes: [string, () => string[], number, number][] = [
    ['stratified partitions with folds, two inputs (one gzip)', () => [input, gz, '--partitions', '4', '--stratify', 'fault', '--folds', '3'], 3, 2],
    ['named splits with groups, spread order', () => [input, '--split', 'train=0.8,test=0.2', '--group', 'sensor', '--stratify', 'fault', '--order', 'spread'], 4, 3],
    ['hash mode with statistics and gzip out', () => [input, '--partitions', '3', '--assign', 'hash', '--key', 'sensor', '--stats', '--gzip'], 2, 4],
  ];
  it.each(modes)('%s: the same bytes as shuffle', async (_name, args, tasks, gatherTasks) => {
    const tag = `${tasks}-${gatherTasks}`;
    const work = join(dir, `work-${tag}`);
    const out = join(dir, `out-${tag}`);
    const common = [...args(), '--seed', 'slurm', '--threads', '1'];
    const planned = await rowdeck(['plan', ...common, '--out', out, '--work', work, '--tasks', String(tasks), '--gather-tasks', String(gatherTasks), '--quiet']);
    expect(planned.status, planned.stderr).toBe(0);
    const plan = readPlan(work);
    expect(plan.scatter.length).toBeGreaterThan(1);
    const submitted = execFileSync('sh', [join(work, 'slurm.sh')], { encoding: 'utf8' });
    const ids = [...submitted.matchAll(/^(scatter|gather|finish) (\d+)$/gm)].map((m) => m[2]!);
    expect(ids).toHaveLength(3);
    const states = await waitForJobs(ids, 240_000);
    // One state per array task: scatter tasks (the last to end made the deal), gather tasks, finish.
    expect(states.filter((s) => s === 'COMPLETED')).toHaveLength(plan.scatter.length + plan.gather.length + 1);
    expect(existsSync(work)).toBe(false);
    const ref = join(dir, `ref-${tag}`);
    expect((await rowdeck(['shuffle', ...common, '--out', ref, '--quiet'])).status).toBe(0);
    const files = spawnSync('sh', ['-c', `cd '${ref}' && find . -type f ! -name manifest.json | sort`], { encoding: 'utf8' }).stdout.trim().split('\n');
    expect(files.length).toBeGreaterThan(1);
    for (const f of files) expect(spawnSync('cmp', [join(ref, f), join(out, f)]).status, f).toBe(0);
    expect(manifestBody(out)).toEqual(manifestBody(ref));
  }, 300_000);
});
