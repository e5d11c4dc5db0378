/**
 * The deal step of a plan (one task, between the scatter and gather stages; the last scatter task
 * to end makes it, or else the first gather tasks, so no scheduler runs it as a stage of its own):
 * checks that the scatter tasks' slices chain (each begins where the one before ended; a slice
 * that began inside a quoted field is read again, from the right start), merges their counts, gives refused
 * records and errors their physical line numbers, counts and places the groups, and makes the
 * plan of stage 2 exactly as `shuffle` does (src/engine/plan.ts), with, for each gather task, its
 * buckets' spill pieces and the ranks its buckets start at.
 */
import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { fromWire, RowdeckError } from '../errors.js';
import type { InputSchema } from '../io/batch.js';
import { planStage } from '../engine/plan-stage.js';
import type { Worst } from '../engine/plan.js';
import type { ManifestInput } from '../engine/manifest.js';
import { mergeScatterResults, type ScatterResult, type ScatterTaskResult } from '../engine/scatter.js';
import { deriveSecrets, placesRecordsIndividually, Rejects } from '../engine/scatter-stage.js';
import type { SpillPiece } from '../engine/spill.js';
import { enterPlan, type ClusterPlan } from './plan.js';
import { decodeJson, encodeJson, readDone, runTask, taskDir, type DoneRecord } from './records.js';
import { absoluteResults, runScatterTask, type ScatterDone, type SliceStarts } from './scatter-task.js';
import { taskCommand } from './commands.js';
import { dealLanes } from './lanes.js';

/**
 * What the deal step hands to the gather tasks and to finish: the manifest's figures from stage 1
 * and the plan (`rejectsFile`: rejected.csv's content in the deal folder, quarantine), and more.
 */
export interface DealDone extends DoneRecord, Pick<ManifestInput, 'inputs' | 'records' | 'rejected' | 'rejectsFile' | 'strataKeys' | 'strataSizes' | 'deal'> {
  schema: Omit<InputSchema, 'headerBytes'> & { headerBytes: string | null };
  worst: Worst;
  fingerprint: { hi: number; lo: number; count: number };
  /** Scatter tasks read again here (their slice began inside a quoted field). */
  reread: number[];
  /** What finish tells the user, as a run on one machine does (whole groups that keep a part or fold from its size). */
  warnings: string[];
}

/** One gather task's share: its buckets' spill pieces, the ranks they start at, and their counts. */
export interface GatherShare {
  first: number;
  end: number;
  pieces: SpillPiece[][];
  rankStart: Float64Array;
  /** `counts[(b - first) * strata + s]`, by dealing stratum. */
  counts: Float64Array;
}

export const gatherShareFile = (index: number): string => `gather-${String(index).padStart(4, '0')}.json`;

/**
 * A share as its file holds it: every spill file's path once and the pieces as columns. (A list
 * of piece objects, each with its path, took a gather task ~20 ms to read at 1 GB over four.)
 */
interface ShareFile {
  first: number;
  end: number;
  paths: string[];
  /** Bucket `first + k`'s pieces are `bucketStart[k]` up to `bucketStart[k + 1]`. */
  bucketStart: Uint32Array;
  task: Uint32Array;
  path: Uint32Array;
  offset: Float64Array;
  length: Float64Array;
  rankStart: Float64Array;
  counts: Float64Array;
}

export function writeShare(path: string, share: GatherShare): void {
  const all = share.pieces.flat();
  const pathIndex = new Map<string, number>();
  const f: ShareFile = {
    first: share.first,
    end: share.end,
    paths: [],
    bucketStart: new Uint32Array(share.pieces.length + 1),
    task: new Uint32Array(all.length),
    path: new Uint32Array(all.length),
    offset: new Float64Array(all.length),
    length: new Float64Array(all.length),
    rankStart: share.rankStart,
    counts: share.counts,
  };
  let i = 0;
  share.pieces.forEach((pieces, k) => {
    f.bucketStart[k] = i;
    for (const p of pieces) {
      if (p.fd !== undefined || p.memory !== undefined) throw new RowdeckError('RDK_INTERNAL', 'a plan\'s spill piece is not in a file');
      let at = pathIndex.get(p.path);
      if (at === undefined) pathIndex.set(p.path, (at = f.paths.push(p.path) - 1));
      f.task[i] = p.task;
      f.path[i] = at;
      f.offset[i] = p.offset;
      f.length[i] = p.length;
      i++;
    }
  });
  f.bucketStart[share.pieces.length] = i;
  writeFileSync(path, encodeJson(f));
}

export function readShare(path: string): GatherShare {
  const f = decodeJson<ShareFile>(readFileSync(path, 'utf8'));
  const pieces = Array.from({ length: f.end - f.first }, (_, k) => {
    const list: SpillPiece[] = [];
    for (let i = f.bucketStart[k]!; i < f.bucketStart[k + 1]!; i++) list.push({ task: f.task[i]!, path: f.paths[f.path[i]!]!, offset: f.offset[i]!, length: f.length[i]! });
    return list;
  });
  return { first: f.first, end: f.end, pieces, rankStart: f.rankStart, counts: f.counts };
}

/** Every scatter task's done record, or an error naming those missing with the command that runs them. */
export function scatterDones(plan: ClusterPlan): ScatterDone[] {
  const dones = plan.scatter.map((_, i) => readDone<ScatterDone>(plan.work, 'scatter', i));
  const missing = dones.flatMap((d, i) => (d === null || d.planId !== plan.planId ? [i] : []));
  if (missing.length > 0) {
    throw new RowdeckError(
      'RDK_TASKS_INCOMPLETE',
      `${missing.length} scatter task(s) of ${plan.scatter.length} not done: ${missing.slice(0, 20).join(', ')}${missing.length > 20 ? ', …' : ''}. Run each: ${taskCommand(plan, 'scatter', missing[0]!)} (--index ${missing.length > 1 ? 'for each' : missing[0]}), then the deal step again.`,
      { missing },
    );
  }
  return dones as ScatterDone[];
}

/**
 * Checks the chain of slices input by input: every scatter task whose slice began at a wrong
 * guess is read again from the start the slice before it ended at, into a folder of its own
 * (stage reread, the task's number), which this and every later deal use instead. The start is
 * fixed by the chain, so deals run at once (the last scatter tasks, gather tasks that found no
 * deal) write the same folder, and the first to finish it keeps it (records.ts). Returns the done
 * records, the folder of each task's spill, and the tasks read again.
 */
async function chainSlices(plan: ClusterPlan): Promise<{ dones: ScatterDone[]; dirs: string[]; reread: number[] }> {
  const dones = scatterDones(plan);
  const dirs = dones.map((_, t) => taskDir(plan.work, 'scatter', t));
  const reread: number[] = [];
  // Walk the slices in input order (tasks are in input order, and a task's slices too).
  for (let t = 0; t < dones.length; t++) {
    for (let j = 0; j < dones[t]!.slices.length; j++) {
      const s = dones[t]!.slices[j]!;
      if (s.slice.start === 0) continue;
      const before = previousSlice(dones, t, j);
      if (!before || before.slice.input !== s.slice.input) throw new RowdeckError('RDK_INTERNAL', `plan: slice ${j} of scatter task ${t} has no slice before it in its input`);
      if (s.start === before.end) continue;
      // Only a task's first slice can begin inside an input (a task takes an input on from where the one before stopped).
      const starts: SliceStarts = new Map([[j, before.end]]);
      await runScatterTask(plan, t, starts, 'reread');
      const again = readDone<ScatterDone>(plan.work, 'reread', t);
      if (!again || again.planId !== plan.planId || again.slices[j]?.start !== before.end) {
        throw new RowdeckError('RDK_INTERNAL', `plan: scatter task ${t} read again does not start at byte ${before.end} of its input; remove ${taskDir(plan.work, 'reread', t)} and run the deal step again`);
      }
      dones[t] = again;
      dirs[t] = taskDir(plan.work, 'reread', t);
      reread.push(t);
    }
  }
  return { dones, dirs, reread };
}

function previousSlice(dones: ScatterDone[], t: number, j: number): ScatterDone['slices'][number] | null {
  if (j > 0) return dones[t]!.slices[j - 1]!;
  for (let u = t - 1; u >= 0; u--) {
    const s = dones[u]!.slices;
    if (s.length > 0) return s[s.length - 1]!;
  }
  return null;
}

/** Lines before each slice's start, input by input (the first slice of an input counts its own). */
function lineBases(dones: ScatterDone[]): number[][] {
  const base: number[][] = dones.map((d) => d.slices.map(() => 0));
  const running = new Map<number, number>();
  dones.forEach((d, t) =>
    d.slices.forEach((s, j) => {
      const k = s.slice.input;
      base[t]![j] = s.slice.start === 0 ? 0 : (running.get(k) ?? 0);
      running.set(k, base[t]![j]! + s.lines);
    }),
  );
  return base;
}

/** The scatter lanes' results of every task, renumbered in task then lane order, merged as one run's. */
function mergeDones(plan: ClusterPlan, dones: ScatterDone[], dirs: string[], schema: InputSchema, censusBuckets: number): ScatterResult {
  const results: ScatterTaskResult[] = [];
  dones.forEach((d, t) => {
    const local = absoluteResults(d, dirs[t]!).sort((a, b) => a.task - b.task);
    for (const r of local) results.push({ ...r, task: results.length });
  });
  const inputs = plan.inputs.map((x) => ({ path: x.given, bytes: 0, records: 0, rejected: 0 }));
  for (const d of dones) {
    for (const x of d.inputs) {
      const to = inputs[x.input]!;
      to.bytes += x.bytes;
      to.records += x.records;
      to.rejected += x.rejected;
    }
  }
  return mergeScatterResults(results, schema, inputs, plan.size.buckets, censusBuckets);
}

function schemaOf(d: ScatterDone): InputSchema {
  return { ...d.schema, headerBytes: d.schema.headerBytes === null ? null : Buffer.from(d.schema.headerBytes, 'base64') } as InputSchema;
}

export async function runDealTask(plan: ClusterPlan): Promise<boolean> {
  const o = enterPlan(plan);
  const secrets = deriveSecrets(o.seed);
  return runTask<Omit<DealDone, keyof DoneRecord>>(plan.work, 'deal', 0, plan.planId, async (dir) => {
    const { dones, dirs, reread } = await chainSlices(plan);
    const bases = lineBases(dones);
    // A slice that stopped at a malformed record, now known to have begun where it should: the
    // run's error, with its physical line.
    dones.forEach((d, t) => {
      if (!d.stopped) return;
      const err = fromWire(d.stopped.error);
      const base = bases[t]![d.stopped.slice]!;
      if (typeof err.details.line === 'number' && err.details.file) {
        const local = err.details.line;
        err.details.line = local + base;
        throw new RowdeckError(err.code, err.message.replace(`${err.details.file}:${local}`, `${err.details.file}:${local + base}`), err.details);
      }
      throw err;
    });
    const schema = schemaOf(dones[0]!);
    const cellKeyInHeader = placesRecordsIndividually(o);
    const censusBits = cellKeyInHeader && o.assign === 'group' ? Math.max(0, plan.size.bits - 2) : null;
    const sc = mergeDones(plan, dones, dirs, schema, censusBits === null ? 0 : 2 ** censusBits);
    // Refused records in input order, with their physical lines (as a single run lists them).
    const rejects = new Rejects(o.onBadRecord === 'quarantine');
    dones.forEach((d, t) => d.rejects.forEach((r) => rejects.add({ file: r.file, line: r.line + bases[t]![r.slice]!, code: r.code, reason: r.reason, bytes: Buffer.from(r.bytes, 'base64') })));

    const { planned, worst, warnings } = await planStage({
      o,
      format: plan.format,
      size: plan.size,
      sc,
      secrets,
      cellKeyInHeader,
      dir,
      withLanes: async (use) => {
        const lanes = (await dealLanes(Math.max(1, plan.size.threads), dir))!;
        try {
          return await use(lanes);
        } finally {
          await lanes.destroy();
        }
      },
      progress: () => {},
    });
    const { records, d, deal } = planned;
    // Each gather task's share: the ranks its first bucket starts at, its buckets' counts and pieces.
    const S = d.strataKeys.length;
    const running = new Float64Array(S);
    plan.gather.forEach((g, m) => {
      const counts = new Float64Array((g.end - g.first) * S);
      const rankStart = Float64Array.from(running);
      for (let b = g.first; b < g.end; b++) {
        for (let l = 0; l < sc.strata.length; l++) {
          const n = sc.bucketCounts[l]![b]!;
          counts[(b - g.first) * S + d.localToGlobal[l]!]! += n;
          running[d.localToGlobal[l]!]! += n;
        }
      }
      const share: GatherShare = { first: g.first, end: g.end, pieces: Array.from({ length: g.end - g.first }, (_, k) => sc.spill.pieces(g.first + k)), rankStart, counts };
      writeShare(join(dir, gatherShareFile(m)), share);
    });
    const rejectedText = rejects.file();
    if (rejectedText !== null) writeFileSync(join(dir, 'rejected.csv'), rejectedText);
    return {
      schema: dones[0]!.schema,
      inputs: sc.inputs.map((x) => ({ ...x, rejected: rejects.perFile.get(x.path) ?? 0 })),
      records,
      rejected: rejects.count,
      rejectsFile: rejectedText !== null ? 'rejected.csv' : null,
      strataKeys: d.strataKeys,
      strataSizes: d.strataSizes,
      deal,
      worst,
      fingerprint: sc.fingerprint.toJSON(),
      reread,
      warnings,
    };
  });
}

/**
 * Whether every scatter task is done. Looks from the last task down: array tasks end in about
 * their order, so a task still running is met early (a plan may have 10,000).
 */
function scatterStageDone(plan: ClusterPlan): boolean {
  for (let t = plan.scatter.length - 1; t >= 0; t--) if (!existsSync(join(taskDir(plan.work, 'scatter', t), 'done.json'))) return false;
  return true;
}

/**
 * The deal step, made here where every scatter task is done and no deal is: what the scatter task
 * that ends last does after its own work (two ending at once both may; the first to finish keeps
 * it), so the gather stage follows the scatter stage directly. A task run again after it was done
 * still makes a deal that is missing or failed. Returns whether this call made it.
 */
export async function dealIfScatterDone(plan: ClusterPlan): Promise<boolean> {
  if (!scatterStageDone(plan) || readDone(plan.work, 'deal', 0) !== null) return false;
  return runDealTask(plan);
}
