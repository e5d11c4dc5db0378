/**
 * `rowdeck finish`: checks every task of a plan is done and consistent with it, joins the gather
 * tasks' slices into the parts (in bucket order, so the bytes are those of `shuffle`), writes the
 * manifest with the tasks' hosts and times in its `run` section, puts the output into place
 * atomically (src/engine/run-work.ts, as `shuffle` does), and removes the work folder.
 */
import { createReadStream, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { rm } from 'node:fs/promises';
import { basename, join } from 'node:path';
import { availableParallelism } from 'node:os';
import { Fingerprint } from '../core/hash.js';
import { TableStats } from '../core/stats.js';
import { RowdeckError, codedSystemError, systemError } from '../errors.js';
import type { InputSchema } from '../io/batch.js';
import type { PartWriter } from '../io/part-writer.js';
import { joinFiles } from '../io/join-files.js';
import type { JoinMessage } from '../workers/protocol.js';
import { WorkerLanes } from '../workers/lanes.js';
import { resolveWorkerFile } from '../workers/worker-file.js';
import { VERSION } from '../version.js';
import { REPORT_FILE, writeManifestReport } from '../report/file.js';
import { buildManifest, hostInfo } from '../engine/manifest.js';
import { checkSameRecords, closeParts, makePartFolders, headerBytes, openParts, partLayout, partRecords, partStatistics, writeSpreadParts } from '../engine/parts.js';
import { partCount } from '../engine/plan.js';
import { startRunWork } from '../engine/run-work.js';
import { SpreadParts } from '../engine/spread-parts.js';
import type { ShuffleRun } from '../engine/shuffle.js';
import { taskCommand } from './commands.js';
import type { DealDone } from './deal.js';
import { dealPlan, partSliceFile, type GatherDone } from './gather-task.js';
import { dealLanes } from './lanes.js';
import { enterPlan, type ClusterPlan } from './plan.js';
import { readDone, readFailed, taskDir, type DoneRecord } from './records.js';
import type { ScatterDone } from './scatter-task.js';

export interface FinishOptions {
  /** Keep the work folder (default: removed once the output is in place). */
  keepWork?: boolean;
  /** Threads that join and hash the parts (default: the machine's cores; 0: the calling thread). */
  threads?: number;
  onNotice?: (text: string) => void;
}

/** Every task's done record, or an error naming the missing and failed ones with the commands that run them. */
function allDone(plan: ClusterPlan): { scatter: ScatterDone[]; deal: DealDone; gather: GatherDone[] } {
  const problems: string[] = [];
  const take = <T extends DoneRecord>(stage: 'scatter' | 'deal' | 'gather', count: number): (T | null)[] =>
    Array.from({ length: count }, (_, i) => {
      const d = readDone<T>(plan.work, stage, i);
      if (d && d.planId === plan.planId) return d;
      const failed = readFailed(plan.work, stage, i);
      const why = d ? 'written for another plan' : failed ? `failed on ${failed.host}: ${failed.error.message}` : 'missing';
      problems.push(`${stage} task ${i} ${why}; run: ${taskCommand(plan, stage, i)}`);
      return null;
    });
  // Past the check below, every record is there (a missing one is a problem listed).
  const present = <T>(records: (T | null)[]): T[] => records.filter((r): r is T => r !== null);
  const scatter = take<ScatterDone>('scatter', plan.scatter.length);
  const deal = take<DealDone>('deal', 1);
  const gather = take<GatherDone>('gather', plan.gather.length);
  if (problems.length > 0) {
    throw new RowdeckError(
      'RDK_TASKS_INCOMPLETE',
      `${problems.length} task(s) of plan ${plan.planId} are not done, so nothing was written:\n  ${problems.slice(0, 20).join('\n  ')}${problems.length > 20 ? `\n  … and ${problems.length - 20} more (rowdeck status ${plan.work})` : ''}`,
      { tasks: problems.length },
    );
  }
  return { scatter: present(scatter), deal: present(deal)[0]!, gather: present(gather) };
}

/** Removes everything in `dir` but `keep`, on libuv's threads. */
async function removeAllBut(dir: string, keep: string | null): Promise<void> {
  await Promise.all(readdirSync(dir).filter((name) => name !== keep).map((name) => rm(join(dir, name), { recursive: true, force: true })));
}

/**
 * Removes the work folder, each task's folder on a libuv thread of its own: unlinking the gather
 * tasks' slices (the size of the output) took ~0.06 s on the calling thread alone.
 */
async function removeWork(work: string): Promise<void> {
  await Promise.all(
    readdirSync(work, { withFileTypes: true }).map(async (e) => {
      const path = join(work, e.name);
      if (e.isDirectory()) await removeAllBut(path, null);
      await rm(path, { recursive: true, force: true });
    }),
  );
  await rm(work, { recursive: true, force: true });
}

/** What a removal met: null, or its error (kept, not thrown, so no rejection goes unheard while the parts are joined). */
function errorOf(removal: Promise<unknown>): Promise<unknown> {
  return removal.then(() => null, (err: unknown) => err);
}

/** Appends a file to a part, a MiB at a time. */
async function appendFile(writer: PartWriter, path: string): Promise<void> {
  const stream = createReadStream(path, { highWaterMark: 1 << 20 });
  try {
    for await (const chunk of stream as AsyncIterable<Buffer>) await writer.write(chunk);
  } catch (err) {
    throw systemError(err, path, 'reading a gather task\'s part');
  }
}

export async function finishCluster(plan: ClusterPlan, f: FinishOptions = {}): Promise<ShuffleRun> {
  const t0 = Date.now();
  const o = enterPlan(plan);
  const done = allDone(plan);
  const { gatherPlan, dir: dealDir } = dealPlan(plan);
  const parts = partCount(gatherPlan.deal);
  // Plain parts are joined on worker lanes of their own (join-worker.ts): started now, their
  // threads load while this one claims the output.
  const plainJoin = gatherPlan.order !== 'spread' && !o.gzip;
  const joinThreads = Math.min(parts, f.threads ?? availableParallelism());
  let joinLanes: WorkerLanes<JoinMessage, null> | null = plainJoin && joinThreads > 0 ? new WorkerLanes(resolveWorkerFile('join-worker.js'), joinThreads, null) : null;
  const dropLanes = async (): Promise<void> => {
    const lanes = joinLanes;
    joinLanes = null;
    await lanes?.destroy().catch(() => {});
  };
  const deal = done.deal;
  // Said as a run on one machine says them, before the parts are written.
  for (const w of deal.warnings) f.onNotice?.(w);
  const schema = { ...deal.schema, headerBytes: deal.schema.headerBytes === null ? null : Buffer.from(deal.schema.headerBytes, 'base64') } as InputSchema;
  const K = gatherPlan.deal.folds;
  const S = gatherPlan.strataCount;
  let work: ReturnType<typeof startRunWork>;
  try {
    work = startRunWork({ out: plan.out, force: o.force, inputs: o.inputs, tempDir: join(plan.work, 'finish'), notice: f.onNotice ?? null });
  } catch (err) {
    await dropLanes();
    throw err;
  }
  let writers: PartWriter[] = [];
  // The output is claimed and every gather task is done, so the spill (the slices the deal read
  // again too) is read no more: removed while the parts are joined (an unlink of pages the disk is
  // still writing waits for them: ~0.4 s for 1 GB here, off the join's path this way). Done
  // records stay. (A finish refused for an output in the way leaves the work whole.)
  const removeSpill = (): Promise<unknown>[] => [...plan.scatter.map((_, t) => removeAllBut(taskDir(plan.work, 'scatter', t), 'done.json')), rm(join(plan.work, 'reread'), { recursive: true, force: true })].map(errorOf);
  let spillRemoved: Promise<unknown> | null = f.keepWork ? null : Promise.all(removeSpill()).then((errs) => errs.find((e) => e !== null) ?? null);
  try {
    const stage = work.stage!;
    const layout = partLayout(o, plan.format);
    const header = headerBytes(schema, o.foldColumn, plan.format);
    const counts = new Float64Array(parts * K * S);
    const fingerprints = Array.from({ length: parts }, () => new Fingerprint());
    for (const g of done.gather) {
      for (let i = 0; i < counts.length; i++) counts[i]! += g.counts[i]!;
      g.fingerprints.forEach((fp, p) => fingerprints[p]!.merge(fp));
    }
    const slicesOf = (p: number): string[] => done.gather.flatMap((g, m) => (g.partBytes[p]! > 0 ? [join(taskDir(plan.work, 'gather', m), partSliceFile(p))] : []));
    let closed: { bytes: number; sha256: string }[];
    if (plainJoin) {
      // Plain parts: each joined and hashed whole on a worker lane, parts side by side.
      makePartFolders(stage, layout);
      const one = (p: number): JoinMessage => ({ kind: 'join', out: join(stage, layout[p]!.path), header, files: slicesOf(p) });
      const lanes = joinLanes;
      try {
        closed = lanes ? await Promise.all(layout.map((_, p) => lanes.run(one(p)))) : layout.map((_, p) => joinFiles(one(p)));
      } finally {
        await dropLanes();
      }
    } else {
      writers = await openParts(stage, layout, o, header, work.spillDir);
      if (gatherPlan.order === 'spread') {
        const spread = new SpreadParts('', parts, S, done.gather.map((g, m) => ({ dir: taskDir(plan.work, 'gather', m), chunks: g.spread! })));
        await writeSpreadParts(spread, writers, counts, K, S, () => {});
      } else {
        for (let p = 0; p < parts; p++) for (const file of slicesOf(p)) await appendFile(writers[p]!, file);
      }
      closed = await closeParts(writers);
      writers = [];
    }
    // Statistics: the lanes' tables of every gather task merged (exact, in any order), or each part read back.
    let stats: { parts: ReturnType<TableStats['summary']>[]; input: ReturnType<TableStats['summary']> } | null = null;
    if (o.stats) {
      if (gatherPlan.statsInLanes) {
        const tables = Array.from({ length: parts }, () => new TableStats(gatherPlan.statsColumns));
        for (const g of done.gather) (g.stats ?? []).forEach((t, i) => tables[i % parts]!.mergeSerialized(t));
        const whole = new TableStats(gatherPlan.statsColumns);
        const summaries = tables.map((t) => {
          whole.merge(t);
          return t.summary({ excludeValues: o.excludeValues });
        });
        stats = { parts: summaries, input: whole.summary({ excludeValues: o.excludeValues }) };
      } else {
        const lanes = await dealLanes(plan.size.threads, dealDir);
        try {
          const { gatherLane, inlineGatherLanes } = await import('../engine/gather-lane.js');
          const inline = lanes ? null : gatherLane(join(dealDir, 'plan.json'));
          const run = lanes ?? inlineGatherLanes(inline!);
          stats = await partStatistics({
            columns: gatherPlan.statsColumns,
            partCount: parts,
            statsInLanes: false,
            excludeValues: o.excludeValues,
            lanes: run,
            inline,
            files: layout.map((part) => join(stage, part.path)),
            headerLength: header?.length ?? 0,
            threads: plan.size.threads,
            progress: () => {},
          });
        } finally {
          await lanes?.destroy();
        }
      }
    }
    const inFp = new Fingerprint();
    inFp.merge(deal.fingerprint);
    const outFp = checkSameRecords(fingerprints, inFp, 'run the plan again from the start.');
    const tasks = [
      ...done.scatter.map((d) => ({ stage: 'scatter', index: d.index, host: d.host, startedAt: d.startedAt, endedAt: d.endedAt })),
      { stage: 'deal', index: 0, host: deal.host, startedAt: deal.startedAt, endedAt: deal.endedAt },
      ...done.gather.map((d) => ({ stage: 'gather', index: d.index, host: d.host, startedAt: d.startedAt, endedAt: d.endedAt })),
    ];
    const manifest = buildManifest({
      version: VERSION,
      options: o,
      format: plan.format,
      schema,
      inputs: deal.inputs,
      records: deal.records,
      rejected: deal.rejected,
      rejectsFile: deal.rejectsFile,
      strataKeys: deal.strataKeys,
      strataSizes: deal.strataSizes,
      binEdges: plan.binEdges,
      deal: deal.deal,
      buckets: plan.size.buckets,
      threads: plan.size.threads,
      // A plan's tasks always spill to files; a gather task splits the buckets too large for it.
      layout: done.gather.some((g) => (g.splits ?? 0) > 0) ? 'multi-pass' : 'spill',
      memory: { budget: plan.size.memory, isDefault: o.memoryIsDefault, splits: done.gather.reduce((a, g) => a + (g.splits ?? 0), 0) },
      parts: partRecords(layout, counts, K, S, closed, fingerprints, stats?.parts ?? null),
      deviation: { max: deal.worst.deviation, kind: deal.worst.kind, part: deal.worst.unit, stratum: deal.worst.stratum },
      fingerprints: { input: inFp.toHex(), output: outFp.toHex() },
      timings: { finishMs: Date.now() - t0 },
      ...(stats ? { inputStats: stats.input } : {}),
      host: hostInfo(),
      plan: { id: plan.planId, tasks, reread: deal.reread },
    });
    const removeError = await spillRemoved;
    spillRemoved = null;
    if (removeError) throw systemError(removeError, plan.work, 'removing the spill');
    if (deal.rejectsFile !== null) writeFileSync(join(stage, 'rejected.csv'), readFileSync(join(dealDir, deal.rejectsFile)), { flag: 'wx' });
    writeFileSync(join(stage, 'manifest.json'), JSON.stringify(manifest, null, 2) + '\n', { flag: 'wx' });
    if (o.report) writeManifestReport(stage, manifest, basename(plan.out));
    work.commit();
    if (!f.keepWork) await removeWork(plan.work);
    return { manifest, out: plan.out, report: o.report ? join(plan.out, REPORT_FILE) : null, warnings: deal.warnings };
  } catch (err) {
    throw codedSystemError(err);
  } finally {
    for (const w of writers) w.abandon();
    await spillRemoved;
    await dropLanes();
    await work.finish();
  }
}
