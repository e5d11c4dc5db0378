/**
 * A shuffle run as a plan's tasks (rowdeck plan / task / finish) gives the bytes of `shuffle`:
 * every part and the manifest (its run section aside), for any number of scatter and gather tasks,
 * in every mode, whatever order the tasks run in, with tasks killed and run again, run twice at
 * once, or a slice that began inside a quoted field. Kubernetes' file is checked field by field and
 * its tasks run as processes with JOB_COMPLETION_INDEX. The Slurm run is test/cluster.slurm.test.ts.
 */
import { existsSync, mkdirSync, readdirSync, readFileSync, rmSync, statSync, utimesSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { gzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { parse as parseYaml } from 'yaml';
import { cutBuckets, cutInputs, loadPlan, planCluster, type PlanOptions } from '../src/cluster/plan.js';
import { runScatterTask } from '../src/cluster/scatter-task.js';
import { readShare, runDealTask, writeShare } from '../src/cluster/deal.js';
import { readDone } from '../src/cluster/records.js';
import { runGatherTask } from '../src/cluster/gather-task.js';
import { finishCluster } from '../src/cluster/finish.js';
import { planStatus } from '../src/cluster/status.js';
import { INDEX_VARIABLES, resolveTaskIndex } from '../src/cluster/task-index.js';
import { shuffle } from '../src/index.js';
import { runShuffle } from '../src/engine/shuffle.js';
import { createRandom, makeSensorCsv, makeTempDir, removeDir } from './helpers/engine.js';
import { manifestBody, readPlan, rowdeck, shuffled } from './helpers/cluster.js';

let dir: string;
let big: string;
let quoted: string;
let lookalike: string;
let gz: string;
let small: string;
let jsonl: string;

beforeAll(() => {
  dir = makeTempDir();
  // Over 1 MiB, so a plan cuts it into byte ranges.
  big = join(dir, 'readings.csv');
  writeFileSync(big, makeSensorCsv({ rows: 80000, seed: 31, sensors: 300 }));
  // Most line ends inside quoted fields: a cut's first guess is usually wrong.
  quoted = join(dir, 'notes.csv');
  const rnd = createRandom(5);
  const lines = ['id,note,label'];
  for (let i = 0; i < 80000; i++) lines.push(`${i},"line one\nline two\nline three ${Math.floor(rnd() * 1000)}\nend",${rnd() < 0.3 ? 'rare' : 'common'}`);
  writeFileSync(quoted, lines.join('\n') + '\n');
  // Notes of many lines as wide as a record (three unquoted fields): the start guess takes some for records.
  lookalike = join(dir, 'lookalike.csv');
  const like = ['id,note,label'];
  for (let i = 0; i < 40000; i++) like.push(`${i},"${Array.from({ length: 12 }, (_, k) => `${k},n${Math.floor(rnd() * 1000)},w`).join('\n')}",${rnd() < 0.3 ? 'rare' : 'common'}`);
  writeFileSync(lookalike, like.join('\n') + '\n');
  gz = join(dir, 'more.csv.gz');
  writeFileSync(gz, gzipSync(makeSensorCsv({ rows: 5000, seed: 32, sensors: 300 })));
  small = join(dir, 'tail.csv');
  writeFileSync(small, makeSensorCsv({ rows: 300, seed: 33, sensors: 300 }));
  jsonl = join(dir, 'events.jsonl');
  writeFileSync(jsonl, Array.from({ length: 30000 }, (_, i) => JSON.stringify({ id: i, crew: `c${i % 97}`, label: i % 5 === 0 ? 'rare' : 'common', note: 'x'.repeat(i % 40) })).join('\n') + '\n');
});
afterAll(() => removeDir(dir));

let n = 0;

/** Plans, runs every task in process (in the order given), finishes; returns the output folder. */
async function runPlanned(o: Omit<PlanOptions, 'out' | 'work'>, order: (kinds: { scatter: number[]; gather: number[] }) => { scatter: number[]; gather: number[] } = (k) => k): Promise<{ out: string; plan: ReturnType<typeof loadPlan> }> {
  const id = n++;
  const out = join(dir, `out-${id}`);
  const work = join(dir, `work-${id}`);
  await planCluster({ threads: 0, ...o, out, work });
  const plan = loadPlan(work);
  const tasks = order({ scatter: plan.scatter.map((_, i) => i), gather: plan.gather.map((_, i) => i) });
  for (const i of tasks.scatter) await runScatterTask(plan, i);
  // No deal step here: the first gather task makes it (the command line's last scatter task would).
  for (const i of tasks.gather) await runGatherTask(plan, i);
  // Every other run joins the parts on the calling thread, the others on worker lanes: the same bytes.
  await finishCluster(plan, id % 2 === 1 ? { threads: 0 } : {});
  return { out, plan };
}

/** The tasks the deal step read again, from an output's manifest. */
function rereadTasks(out: string): number[] {
  return (JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as { run: { plan: { reread: number[] } } }).run.plan.reread;
}

/** A sensor CSV of `rows` records whose lines `at` (0: the header) have two fields too many. */
function writeWithExtraFields(name: string, rows: number, seed: number, at: number[]): string {
  const path = join(dir, name);
  const text = makeSensorCsv({ rows, seed }).split('\n');
  for (const k of at) text[k] = `${text[k]},extra,fields`;
  writeFileSync(path, text.join('\n'));
  return path;
}

/** `rowdeck plan` as a process, into work and output folders named for `name`. */
async function planByProcess(name: string, args: string[], tasks: number, gatherTasks: number): Promise<{ work: string; out: string; plan: ReturnType<typeof readPlan> }> {
  const work = join(dir, `${name}-work`);
  const out = join(dir, `${name}-out`);
  const planned = await rowdeck(['plan', ...args, '--out', out, '--work', work, '--tasks', String(tasks), '--gather-tasks', String(gatherTasks), '--quiet']);
  expect(planned.status, planned.stderr).toBe(0);
  return { work, out, plan: readPlan(work) };
}

/** The same options through `shuffle`. */
async function reference(o: Omit<PlanOptions, 'out' | 'work' | 'tasks' | 'gatherTasks'>): Promise<string> {
  const out = join(dir, `ref-${n++}`);
  await shuffle({ ...o, out });
  return out;
}

function expectSameOutput(a: string, b: string): void {
  const files = (d: string): string[] => readdirSync(d, { recursive: true }).map(String).filter((f) => statSync(join(d, f)).isFile()).sort();
  expect(files(a)).toEqual(files(b));
  for (const f of files(a)) {
    if (f === 'manifest.json') continue;
    expect(readFileSync(join(a, f)).equals(readFileSync(join(b, f))), f).toBe(true);
  }
  expect(manifestBody(a)).toEqual(manifestBody(b));
}

describe('the task index', () => {
  it('comes from --index, else from the first scheduler variable set (two of them count from 1)', () => {
    expect(resolveTaskIndex('3', 5, 'scatter', {})).toEqual({ index: 3, from: '--index' });
    for (const v of INDEX_VARIABLES) {
      const got = resolveTaskIndex(undefined, 5, 'gather', { [v.name]: String(2 + v.base) });
      expect(got.index, v.name).toBe(2);
      expect(got.from).toContain(v.name);
    }
    expect(resolveTaskIndex(undefined, 5, 'gather', { SGE_TASK_ID: '1', SLURM_ARRAY_TASK_ID: '4' }).index).toBe(4);
  });

  it('none set, out of range, or not a number: a usage error naming the variables and the range', () => {
    expect(() => resolveTaskIndex(undefined, 4, 'scatter', {})).toThrow(expect.objectContaining({ code: 'RDK_MISSING_ARGUMENT', message: expect.stringContaining('SLURM_ARRAY_TASK_ID, JOB_COMPLETION_INDEX, AWS_BATCH_JOB_ARRAY_INDEX, PBS_ARRAY_INDEX, SGE_TASK_ID, LSB_JOBINDEX') }));
    expect(() => resolveTaskIndex(undefined, 4, 'scatter', { JOB_COMPLETION_INDEX: '4' })).toThrow(expect.objectContaining({ code: 'RDK_OPTION', message: expect.stringContaining('0 to 3') }));
    expect(() => resolveTaskIndex(undefined, 4, 'scatter', { LSB_JOBINDEX: '0' })).toThrow(expect.objectContaining({ code: 'RDK_OPTION', message: expect.stringContaining('counted from 1') }));
    expect(() => resolveTaskIndex('x', 4, 'scatter', {})).toThrow(expect.objectContaining({ code: 'RDK_OPTION' }));
  });
});

describe('cutting the work', () => {
  it('covers every input once, in order: small and gzip files whole, large plain files in ranges of at least 1 MiB', () => {
    const inputs = [{ bytes: 10e6, gzip: false }, { bytes: 3e6, gzip: true }, { bytes: 500, gzip: false }, { bytes: 7e6, gzip: false }];
    for (const tasks of [1, 2, 3, 5, 8, 20]) {
      const cut = cutInputs(inputs, tasks);
      expect(cut.length).toBeLessThanOrEqual(tasks);
      const slices = cut.flatMap((t) => t.slices);
      inputs.forEach((x, k) => {
        const mine = slices.filter((s) => s.input === k);
        expect(mine[0]!.start).toBe(0);
        expect(mine[mine.length - 1]!.end).toBe(-1);
        for (let j = 1; j < mine.length; j++) expect(mine[j]!.start).toBe(mine[j - 1]!.end);
        if (x.gzip || x.bytes < 2 ** 20) expect(mine).toHaveLength(1);
        for (const s of mine) if (s.end > 0) expect(s.end - s.start).toBeGreaterThanOrEqual(2 ** 20);
      });
      // Input order is kept across tasks.
      expect(slices.map((s) => s.input)).toEqual([...slices.map((s) => s.input)].sort((a, b) => a - b));
    }
    const ten = cutInputs(Array.from({ length: 10000 }, () => ({ bytes: 2000, gzip: false })), 1000);
    expect(ten).toHaveLength(1000);
    expect(cutBuckets(16, 5).map((r) => r.end - r.first)).toEqual([3, 3, 3, 3, 4]);
    expect(cutBuckets(4, 10)).toHaveLength(4);
  });

  it("a gather task's share reads back as written: every bucket's pieces in order, empty buckets, offsets past 4 GiB", () => {
    const dir = makeTempDir('rowdeck-share-');
    try {
      const random = createRandom(7);
      const paths = ['/w/scatter/0000/scatter-0000-00.spill', '/w/scatter/0001/scatter-0001-00.spill', '/w/reread/0002/scatter-0002-03.spill'];
      const pieces = Array.from({ length: 40 }, (_, b) =>
        b % 9 === 4 ? [] : Array.from({ length: 1 + Math.floor(random() * 6) }, (_, k) => ({ task: k % 3, path: paths[(b + k) % 3]!, offset: Math.floor(random() * 2 ** 40), length: 1 + Math.floor(random() * 2 ** 20) })),
      );
      const share = { first: 100, end: 140, pieces, rankStart: Float64Array.of(3, 0, 17), counts: Float64Array.from({ length: 120 }, () => Math.floor(random() * 1000)) };
      const file = join(dir, 'gather-0003.json');
      writeShare(file, share);
      const back = readShare(file);
      expect(back).toEqual(share);
      // Each path is written once, not once a piece.
      const text = readFileSync(file, 'utf8');
      for (const p of paths) expect(text.split(p).length - 1).toBe(1);
      // A piece held in memory is not a plan's: refused, not written as if it were a file's.
      expect(() => writeShare(file, { ...share, pieces: [[{ task: 0, path: '', offset: 0, length: 8, memory: new SharedArrayBuffer(8) }]] })).toThrow(/not in a file/);
    } finally {
      removeDir(dir);
    }
  });
});

describe('the same bytes as shuffle', () => {
  // Options made once the inputs exist (beforeAll).
  const modes: [string, () => Omit<PlanOptions, 'out' | 'work' | 'tasks' | 'gatherTasks'>][] = [
    ['partitions, stratified, folds; two inputs, one gzip', () => ({ inputs: [big, gz], seed: 's1', partitions: 4, stratify: 'fault', folds: 3 })],
    ['named splits with groups', () => ({ inputs: [big, small], seed: 's2', split: 'train=0.7,valid=0.2,test=0.1', group: 'sensor', stratify: 'fault' })],
    ['hash mode', () => ({ inputs: [big], seed: 's3', partitions: 3, assign: 'hash', key: 'sensor', folds: 2 })],
    ['quantile bins, --stats, gzip out', () => ({ inputs: [big], seed: 's4', partitions: 2, stratify: 'reading:bins=4', stats: true, gzip: true })],
    ['spread order, record counts with the rest', () => ({ inputs: [big], seed: 's5', split: 'test=3000,train=*', stratify: 'fault', order: 'spread' })],
    ['quoted line breaks across cuts', () => ({ inputs: [quoted], seed: 's6', partitions: 3, stratify: 'label', folds: 2 })],
    ['JSON Lines, grouped order', () => ({ inputs: [jsonl], seed: 's7', partitions: 3, group: 'crew', order: 'grouped' })],
    ['statistics read back from many parts', () => ({ inputs: [big], seed: 's8', partitions: 40, stats: true, memory: '8MiB' })],
    // 1 MiB a task: the multi-pass layout, every bucket split in the gather tasks, every census bucket in the deal step.
    ['a budget far below the input: buckets and census buckets split', () => ({ inputs: [big], seed: 's9', partitions: 3, group: 'sensor', stratify: 'fault', folds: 2, memory: '1MiB' })],
  ];
  it.each(modes)('%s', async (_name, make) => {
    const o = make();
    const ref = await reference(o);
    for (const [tasks, gatherTasks] of [[3, 2], [5, 7]] as const) {
      const { out, plan } = await runPlanned({ ...o, tasks, gatherTasks }, (k) => ({ scatter: k.scatter.reverse(), gather: k.gather.reverse() }));
      expect(plan.scatter.length).toBeGreaterThan(1);
      expectSameOutput(ref, out);
      expect(existsSync(plan.work)).toBe(false);
      if (o.memory === '1MiB') {
        const run = (JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as { run: { layout: string; bucketsSplit: number } }).run;
        expect(run.layout).toBe('multi-pass');
        expect(run.bucketsSplit).toBeGreaterThan(1);
      }
    }
  });

  it('a slice that began inside a quoted field is read again by the deal step, from the right start', async () => {
    const { out, plan } = await runPlanned({ inputs: [quoted], seed: 'q', partitions: 2, tasks: 4, gatherTasks: 2 }, (k) => k);
    expect(plan.scatter.length).toBeGreaterThan(2);
    const m = JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as { run: { plan: { tasks: { stage: string }[]; reread: number[] } } };
    expect(m.run.plan.tasks.filter((t) => t.stage === 'scatter')).toHaveLength(plan.scatter.length);
    // Four of five line ends are inside quotes, but what follows them never reads as whole records: no guess was wrong.
    expect(m.run.plan.reread).toEqual([]);
  });

  it('a slice whose guess was fooled by record-like lines inside quotes is read again by the deal step', async () => {
    const { out, plan } = await runPlanned({ inputs: [lookalike], seed: 'q', partitions: 2, tasks: 4, gatherTasks: 2 }, (k) => k);
    expect(plan.scatter.length).toBeGreaterThan(2);
    const ref = await reference({ inputs: [lookalike], seed: 'q', partitions: 2 });
    expectSameOutput(ref, out);
    expect(rereadTasks(out).length).toBeGreaterThan(0);
  });

  it('quarantined records keep their physical lines whichever task read them', async () => {
    const bad = writeWithExtraFields('bad.csv', 40000, 34, [5, 9000, 21000, 33000]);
    const o = { inputs: [bad], seed: 'bad', partitions: 2, onBadRecord: 'quarantine' as const };
    const ref = await reference(o);
    const { out } = await runPlanned({ ...o, tasks: 4, gatherTasks: 2 });
    expectSameOutput(ref, out);
    expect(readFileSync(join(out, 'rejected.csv'), 'utf8').split('\n').filter(Boolean)).toHaveLength(5);
  });

  it('whole groups that keep parts from their sizes: finish tells what shuffle tells, before the parts are written', async () => {
    // Four sites of about a quarter each for three parts: one part takes two, about 1.5 times its
    // share, more than the tolerance asked for (the class mix is not stratified, so only sizes are off).
    const o = { inputs: [big], seed: 'lumpy', partitions: 3, group: 'site', tolerance: 0.2 };
    const said: string[] = [];
    const ref = await runShuffle({ ...o, out: join(dir, `ref-${n++}`), onNotice: (t) => said.push(t) });
    expect(ref.warnings.length).toBeGreaterThan(0);
    expect(said).toEqual(ref.warnings);
    const id = n++;
    await planCluster({ threads: 0, ...o, tasks: 3, gatherTasks: 2, out: join(dir, `out-${id}`), work: join(dir, `work-${id}`) });
    const plan = loadPlan(join(dir, `work-${id}`));
    for (let i = 0; i < plan.scatter.length; i++) await runScatterTask(plan, i);
    await runDealTask(plan);
    for (let i = 0; i < plan.gather.length; i++) await runGatherTask(plan, i);
    const told: string[] = [];
    const run = await finishCluster(plan, { onNotice: (t) => told.push(t) });
    expect(run.warnings).toEqual(ref.warnings);
    expect(told).toEqual(ref.warnings);
    expectSameOutput(ref.out, run.out);
  });
});

describe('tasks as processes', () => {
  it('Kubernetes: the Jobs file field by field, and the tasks run with JOB_COMPLETION_INDEX in shuffled order give shuffle\'s bytes', async () => {
    const work = join(dir, 'k8s-work');
    const out = join(dir, 'k8s-out');
    const args = [big, gz, '--seed', 'k8s', '--partitions', '3', '--stratify', 'fault', '--folds', '2', '--threads', '1'];
    const planned = await rowdeck(['plan', ...args, '--out', out, '--work', work, '--tasks', '3', '--gather-tasks', '2', '--image', 'registry.example/rowdeck:0.2', '--claim', 'lab-data', '--mount-path', '/']);
    expect(planned.status, planned.stderr).toBe(0);
    const plan = readPlan(work);
    const docs = readFileSync(join(work, 'kubernetes.yaml'), 'utf8').split(/^---$/m).slice(1).map((d) => parseYaml(d) as Record<string, any>);
    // No Job for the deal: the last scatter task to end makes it.
    expect(docs.map((d) => d.metadata.labels['rowdeck/stage'])).toEqual(['scatter', 'gather', 'finish']);
    const counts = { scatter: plan.scatter.length, gather: plan.gather.length, finish: 1 } as Record<string, number>;
    for (const d of docs) {
      const stage = d.metadata.labels['rowdeck/stage'] as string;
      expect(d.apiVersion).toBe('batch/v1');
      expect(d.kind).toBe('Job');
      expect(d.spec.completionMode).toBe('Indexed');
      expect(d.spec.completions).toBe(counts[stage]);
      expect(d.spec.parallelism).toBe(counts[stage]);
      const pod = d.spec.template.spec;
      expect(pod.restartPolicy).toBe('Never');
      expect(pod.volumes).toEqual([{ name: 'shared', persistentVolumeClaim: { claimName: 'lab-data' } }]);
      const c = pod.containers[0];
      expect(c.image).toBe('registry.example/rowdeck:0.2');
      expect(c.volumeMounts).toEqual([{ name: 'shared', mountPath: '/' }]);
      expect(c.command).toEqual(stage === 'finish' ? [plan.runner.node, plan.runner.cli, 'finish', work] : [plan.runner.node, plan.runner.cli, 'task', work, '--stage', stage]);
      expect(c.resources.requests.cpu).toBe('1');
    }
    // Each Job's pods, as the Indexed Job would run them: the command with JOB_COMPLETION_INDEX.
    const rnd = createRandom(9);
    for (const d of docs) {
      const stage = d.metadata.labels['rowdeck/stage'] as string;
      const c = d.spec.template.spec.containers[0];
      for (const i of shuffled(Array.from({ length: counts[stage]! }, (_, k) => k), rnd)) {
        const r = await rowdeck(c.command.slice(2), { env: { JOB_COMPLETION_INDEX: String(i) } });
        expect(r.status, `${stage} ${i}: ${r.stderr}`).toBe(0);
      }
    }
    const ref = join(dir, 'k8s-ref');
    expect((await rowdeck(['shuffle', ...args, '--out', ref, '--quiet'])).status).toBe(0);
    expectSameOutput(ref, out);
  });

  it('tasks killed at random moments and run again, run twice at once, run after they are done: the same bytes; a missing one is named', async () => {
    const args = [big, '--seed', 'faults', '--partitions', '4', '--stratify', 'fault', '--threads', '1'];
    const { work, out, plan } = await planByProcess('fault', args, 4, 3);
    expect(plan.scatter.length).toBeGreaterThan(2);
    const rnd = createRandom(77);
    let killed = 0;
    const stage = async (name: string, count: number): Promise<void> => {
      for (const i of shuffled(Array.from({ length: count }, (_, k) => k), rnd)) {
        // A run killed at a random moment first (it may or may not have finished), then two at once.
        const k = await rowdeck(['task', work, '--stage', name, '--index', String(i), '--quiet'], { killAfterMs: 50 + Math.floor(rnd() * 400) });
        if (k.signal === 'SIGKILL') killed++;
        const [a, b] = await Promise.all([rowdeck(['task', work, '--stage', name, '--index', String(i), '--quiet']), rowdeck(['task', work, '--stage', name, '--index', String(i), '--quiet'])]);
        expect([a.status, b.status], a.stderr + b.stderr).toEqual([0, 0]);
      }
    };
    await stage('scatter', plan.scatter.length);
    // The scatter tasks (killed, run twice at once) made the deal: no step of its own.
    expect(readDone(work, 'deal', 0)?.planId).toBe(plan.planId);
    // One gather task left out: finish refuses, naming it and the command that runs it, and writes nothing.
    const gathers = plan.gather.length;
    expect(gathers).toBeGreaterThan(1);
    await stage('gather', gathers - 1);
    const left = Array.from({ length: gathers }, (_, i) => i).find((i) => !existsSync(join(work, 'gather', String(i).padStart(4, '0'), 'done.json')))!;
    const refused = await rowdeck(['finish', work]);
    expect(refused.status).toBe(1);
    expect(refused.stderr).toContain('RDK_TASKS_INCOMPLETE');
    expect(refused.stderr).toContain(`gather task ${left} missing`);
    expect(refused.stderr).toContain(`--stage' 'gather' --index ${left}`);
    expect(existsSync(out)).toBe(false);
    const status = planStatus(loadPlan(work));
    expect(status.stages.find((s) => s.stage === 'gather')!.done).toBe(gathers - 1);
    expect(status.next[0]).toContain(`--index ${left}`);
    expect((await rowdeck(['task', work, '--stage', 'gather', '--index', String(left), '--quiet'])).status).toBe(0);
    // Done tasks again: nothing to do.
    const again = await rowdeck(['task', work, '--stage', 'scatter', '--index', '0']);
    expect(again.stderr).toContain('already done');
    expect((await rowdeck(['finish', work, '--quiet'])).status).toBe(0);
    const ref = join(dir, 'fault-ref');
    expect((await rowdeck(['shuffle', ...args, '--out', ref, '--quiet'])).status).toBe(0);
    expectSameOutput(ref, out);
    // Most of the kills landed inside a task (the rest after it ended).
    expect(killed).toBeGreaterThan(0);
  });
});

describe('the deal step, made by the tasks', () => {
  it('the last scatter task to end makes it; gather tasks at once that find none make it, slices read again included: shuffle\'s bytes', async () => {
    const { work, out, plan } = await planByProcess('deal', [lookalike, '--seed', 'dealt', '--partitions', '2', '--stratify', 'label', '--threads', '0'], 4, 2);
    const last = plan.scatter.length - 1;
    expect(last).toBeGreaterThan(1);
    for (let i = 0; i < last; i++) {
      const r = await rowdeck(['task', work, '--stage', 'scatter', '--index', String(i)]);
      expect(r.status, r.stderr).toBe(0);
      expect(r.stderr).not.toContain('deal step made');
    }
    expect(existsSync(join(work, 'deal', '0000', 'done.json'))).toBe(false);
    const r = await rowdeck(['task', work, '--stage', 'scatter', '--index', String(last)]);
    expect(r.status, r.stderr).toBe(0);
    expect(r.stderr).toContain('every scatter task is done: the deal step made');
    expect(readDone(work, 'deal', 0)?.planId).toBe(plan.planId);
    // The record-like lines fooled a start guess: a slice was read again, in a folder of its own.
    expect(readdirSync(join(work, 'reread')).filter((f) => !f.startsWith('.')).length).toBeGreaterThan(0);
    // As if the last scatter task had been killed before its deal: both gather tasks, at once, find none.
    rmSync(join(work, 'deal', '0000'), { recursive: true });
    rmSync(join(work, 'reread'), { recursive: true });
    expect(planStatus(loadPlan(work)).next[0]).toContain('deal: not made yet; the gather tasks make it as they start');
    const both = await Promise.all(plan.gather.map((_, i) => rowdeck(['task', work, '--stage', 'gather', '--index', String(i), '--quiet'])));
    for (const b of both) expect(b.status, b.stderr).toBe(0);
    expect(readDone(work, 'deal', 0)?.planId).toBe(plan.planId);
    expect((await rowdeck(['finish', work, '--keep-work', '--quiet'])).status).toBe(0);
    // --keep-work keeps the spill, the slices read again among it.
    const kept = (sub: string): string[] => readdirSync(join(work, sub), { recursive: true }).map(String).filter((f) => f.endsWith('.spill'));
    expect(kept('scatter').length).toBeGreaterThan(0);
    expect(kept('reread').length).toBeGreaterThan(0);
    const ref = await reference({ inputs: [lookalike], seed: 'dealt', partitions: 2, stratify: ['label'] });
    expectSameOutput(ref, out);
    expect(rereadTasks(out).length).toBeGreaterThan(0);
  });

  it('a deal that fails fails the last scatter task, its own work kept, and every gather task after it, with the record\'s physical line', async () => {
    // Large enough for several byte ranges; the record in the last one, which does not start at a known record start.
    const bad = writeWithExtraFields('bad-deal.csv', 120000, 35, [110000]);
    const { work, plan } = await planByProcess('bad-deal', [bad, '--seed', 'bad', '--partitions', '2', '--threads', '0'], 4, 2);
    expect(plan.scatter.length).toBeGreaterThan(2);
    const runs = [];
    for (let i = 0; i < plan.scatter.length; i++) runs.push(await rowdeck(['task', work, '--stage', 'scatter', '--index', String(i), '--quiet']));
    const failed = runs.at(-1)!;
    expect(runs.slice(0, -1).map((x) => x.status)).toEqual(runs.slice(0, -1).map(() => 0));
    expect(failed.status).toBe(1);
    expect(failed.stderr).toContain("this task's own work is kept");
    // The physical line of the malformed record (line 1 is the header).
    expect(failed.stderr).toContain('bad-deal.csv:110001:');
    expect(readDone(work, 'scatter', plan.scatter.length - 1)?.planId).toBe(plan.planId);
    const status = planStatus(loadPlan(work));
    expect(status.stages.find((x) => x.stage === 'deal')!.failed).toBe(1);
    expect(status.next[0]).toMatch(/^deal: failed; mend the cause, then .*--stage' 'deal'/);
    const gather = await rowdeck(['task', work, '--stage', 'gather', '--index', '0', '--quiet']);
    expect(gather.status).toBe(1);
    expect(gather.stderr).toContain('bad-deal.csv:110001:');
  });
});

describe('honest errors', () => {
  it('finish refused for an output in the way keeps the spill (a gather task can still run again) and its lanes end with it', async () => {
    const work = join(dir, 'claimed-work');
    const out = join(dir, 'claimed-out');
    await planCluster({ inputs: [big], out, work, tasks: 2, gatherTasks: 2, threads: 0, seed: 'claimed', partitions: 3 });
    const plan = loadPlan(work);
    for (let i = 0; i < plan.scatter.length; i++) await runScatterTask(plan, i);
    await runDealTask(plan);
    for (let i = 0; i < plan.gather.length; i++) await runGatherTask(plan, i);
    const spillFiles = (): string[] => readdirSync(join(work, 'scatter'), { recursive: true }).map(String).filter((f) => f.endsWith('.spill'));
    const before = spillFiles();
    expect(before.length).toBeGreaterThan(0);
    mkdirSync(out);
    writeFileSync(join(out, 'mine.txt'), 'not rowdeck\n');
    // As a process: worker lanes started before the claim must not keep it alive.
    const refused = await rowdeck(['finish', work, '--threads', '2']);
    expect(refused.status, refused.stderr).toBe(1);
    expect(refused.stderr).toContain('RDK_OUTPUT_EXISTS');
    expect(spillFiles()).toEqual(before);
    rmSync(out, { recursive: true });
    expect((await rowdeck(['finish', work, '--quiet'])).status).toBe(0);
    expect(existsSync(join(out, 'manifest.json'))).toBe(true);
    expect(existsSync(work)).toBe(false);
  });

  it('stdin, --temp-dir, a work folder in use, an input changed since the plan, another version, no such folder', async () => {
    const work = join(dir, 'err-work');
    const out = join(dir, 'err-out');
    await expect(planCluster({ inputs: ['-'], out, work, tasks: 2 })).rejects.toMatchObject({ code: 'RDK_OPTION', message: expect.stringContaining('standard input') });
    await expect(planCluster({ inputs: [small], out, work, tasks: 2, tempDir: dir })).rejects.toMatchObject({ code: 'RDK_OPTION' });
    await expect(planCluster({ inputs: [small], out, work, tasks: 2, partitions: 0 })).rejects.toMatchObject({ code: 'RDK_OPTION', message: expect.stringContaining('partitions') });
    const copy = join(dir, 'changing.csv');
    writeFileSync(copy, readFileSync(small));
    await planCluster({ inputs: [copy], out, work, tasks: 2, threads: 0 });
    await expect(planCluster({ inputs: [copy], out, work, tasks: 2 })).rejects.toMatchObject({ code: 'RDK_OUTPUT_EXISTS' });
    // No index from anywhere: a usage error (exit 2) naming the scheduler variables.
    const noIndex = await rowdeck(['task', work, '--stage', 'scatter'], { env: { SLURM_ARRAY_TASK_ID: '', JOB_COMPLETION_INDEX: '' } });
    expect(noIndex.status).toBe(2);
    expect(noIndex.stderr).toContain('JOB_COMPLETION_INDEX');
    const outOfRange = await rowdeck(['task', work, '--stage', 'gather'], { env: { SGE_TASK_ID: '99' } });
    expect(outOfRange.status).toBe(2);
    expect(outOfRange.stderr).toContain('SGE_TASK_ID');
    utimesSync(copy, new Date(), new Date(Date.now() + 5000));
    await expect(runScatterTask(loadPlan(work), 0)).rejects.toMatchObject({ code: 'RDK_INPUT_CHANGED', message: expect.stringContaining('make a new plan') });
    const planFile = join(work, 'plan.json');
    writeFileSync(planFile, readFileSync(planFile, 'utf8').replace(/"tool": "[^"]+"/, '"tool": "0.0.1"'));
    expect(() => loadPlan(work)).toThrow(expect.objectContaining({ code: 'RDK_PLAN', message: expect.stringContaining('rowdeck 0.0.1') }));
    expect(() => loadPlan(join(dir, 'nowhere'))).toThrow(expect.objectContaining({ code: 'RDK_INPUT_NOT_FOUND' }));
    const other = await rowdeck(['task', work, '--stage', 'scatter', '--index', '0']);
    expect(other.status).toBe(1);
    expect(other.stderr).toContain('RDK_PLAN');
  });
});

describe('scale', () => {
  it('a plan over 10,000 input files; a gather task over 1,000 scatter tasks opens few files at once', async () => {
    const many = join(dir, 'many');
    const { mkdirSync } = await import('node:fs');
    mkdirSync(many);
    const inputs: string[] = [];
    for (let i = 0; i < 10000; i++) {
      const p = join(many, `r${String(i).padStart(5, '0')}.csv`);
      writeFileSync(p, `id,label\n${i},${i % 3 === 0 ? 'rare' : 'common'}\n${i + 10000},common\n`);
      inputs.push(p);
    }
    const work = join(dir, 'many-work');
    const out = join(dir, 'many-out');
    await planCluster({ inputs, out, work, tasks: 1000, gatherTasks: 1, partitions: 2, stratify: 'label', seed: 'many', threads: 0 });
    const plan = loadPlan(work);
    expect(plan.scatter).toHaveLength(1000);
    for (let i = 0; i < 1000; i++) await runScatterTask(plan, i);
    await runDealTask(plan);
    const fds = (): number => readdirSync('/proc/self/fd').length;
    const before = fds();
    let most = before;
    const timer = setInterval(() => (most = Math.max(most, fds())), 1);
    await runGatherTask(plan, 0);
    clearInterval(timer);
    await finishCluster(plan);
    expect(most - before).toBeLessThan(32);
    const m = JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as { input: { records: number; files: unknown[] } };
    expect(m.input.records).toBe(20000);
    expect(m.input.files).toHaveLength(10000);
  }, 120_000);
});
