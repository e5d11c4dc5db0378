/**
 * `shuffle()`: the whole job, as a short sequence of named steps, each a module of its own that
 * takes and returns plain data (the cluster's tasks run the same steps, src/cluster/):
 *
 *   claim the output      run-work.ts (output-folder.ts: lock, staging, commit; cleanup on signals)
 *   size the run          sizing.ts (layout, buckets, buffers, blocks from the inputs and the budget);
 *                         disk-space.ts (room for the spill and the parts, before any work)
 *   scatter               scatter-stage.ts → scatter.ts on the worker lanes: spill buckets + counts
 *                         (in memory in the memory layout, spill-index.ts says where each lies)
 *   plan                  plan-stage.ts: plan.ts (dealing order, quotas, expected counts, the
 *                         tolerance check); group-census.ts (groups counted and placed) →
 *                         plan.json, groups.bin
 *   gather                gatherIntoParts below: gather-stage.ts → gather.ts on the same lanes,
 *                         buckets dealt in order (split.ts: those too large split first, the
 *                         multi-pass layout)
 *   assemble the parts    parts.ts (writers, spread order, sizes, sha256, statistics)
 *   write the manifest    manifest.ts, then the commit that puts the output into place
 *
 * Output goes to a hidden staging folder and is put into place only after the manifest is
 * written, so a failed or killed run never leaves a folder that looks complete. Spill files live
 * in their own hidden folder, removed on success and on failure.
 */
import { writeFileSync } from 'node:fs';
import { basename, join } from 'node:path';
import { RowdeckError, codedSystemError, systemError } from '../errors.js';
import { chooseFormat } from '../io/sniff.js';
import { optionSetting, resolveShuffleOptions, type ProgressEvent, type ShuffleOptions } from '../options.js';
import { VERSION } from '../version.js';
import { REPORT_FILE, writeManifestReport } from '../report/file.js';
import { runGatherStage } from './gather-stage.js';
import { planStage } from './plan-stage.js';
import { buildManifest, hostInfo, type Manifest } from './manifest.js';
import { checkSameRecords, closeParts, headerBytes, openParts, partRecords, partStatistics, spreadSink, writeSpreadParts, writerSink, type PartInfo, type PartStatistics } from './parts.js';
import type { GatherPlan } from './plan.js';
import type { Fingerprint } from '../core/hash.js';
import { checkInputs, startRunWork, type RunWork } from './run-work.js';
import { deriveSecrets, placesRecordsIndividually, runScatterStage, type ShuffleLanes } from './scatter-stage.js';
import { sizeRun, type Layout, type RunSize } from './sizing.js';
import { SPILL_FILES, spillRanges } from './spill.js';
import { openMemoryStore, type MemoryStore } from './ram-store.js';
import { checkFreeSpace } from './disk-space.js';
import { estimateInputBytes, isStreamInput } from '../io/input.js';
import { SpreadParts } from './spread-parts.js';

export { BUFFER_CAP, chooseBuckets, spillFactor } from './sizing.js';
export { partLayout, type PartInfo } from './parts.js';
export { resolveWorkerFile } from '../workers/worker-file.js';
/** Removes the work folders of dead runs in `dir` (see src/io/work-folders.ts). */
export { removeStaleWorkFolders } from '../io/work-folders.js';

export interface ShuffleRun {
  manifest: Manifest;
  /** Final output folder. */
  out: string;
  /** The report written with `report: true` (in `out`), else null. */
  report: string | null;
  /** Warnings about the result, each also told to `onNotice` (parts far from their sizes with `group`). */
  warnings: string[];
}

/** Shuffles and deals the inputs; returns the manifest written to `out/manifest.json`. */
export async function shuffle(options: ShuffleOptions): Promise<Manifest> {
  return (await runShuffle(options)).manifest;
}

export async function runShuffle(options: ShuffleOptions): Promise<ShuffleRun> {
  return runPipeline(options, {});
}

/** How `runPipeline` delivers: part files in an output folder, or (a replay) only their hashes. */
export interface PipelineSink {
  /** 'hash': nothing is written but the spill; the manifest comes back with each part's sha256 as a real run would write it. */
  sink?: 'files' | 'hash';
  /** With 'hash': the spill's folder unless `tempDir` is given. */
  spillBeside?: string;
}

/** The shuffle itself; `runShuffle` writes files, `verify --against` replays through it (src/engine/replay.ts). */
export async function runPipeline(options: ShuffleOptions, how: PipelineSink): Promise<ShuffleRun> {
  const o = resolveShuffleOptions(options);
  const t0 = Date.now();
  const timings: Record<string, number> = {};
  checkInputs(o.inputs);
  const format = await chooseFormat(o.inputs, o.format, (v) => optionSetting(o.surface, 'format', v));
  const secrets = deriveSecrets(o.seed);
  let runLayout: Layout | undefined;
  let splits = 0;
  const progress = (stage: ProgressEvent['stage'], records: number) => (done: number, total: number): void =>
    o.onProgress?.({ stage, done, total, records, elapsedMs: Date.now() - t0, ...(runLayout ? { layout: runLayout } : {}), ...(splits > 0 ? { splits } : {}) });

  // Claim the output (and the spill's folder): cleaned up whatever happens.
  const hashOnly = how.sink === 'hash';
  const work: RunWork = startRunWork({
    out: hashOnly ? null : o.out,
    force: o.force,
    inputs: o.inputs,
    tempDir: o.tempDir,
    ...(how.spillBeside !== undefined ? { spillBeside: how.spillBeside } : {}),
    notice: o.onNotice,
  });
  const out = work.claim?.out ?? o.out;
  let lanes: ShuffleLanes | null = null;
  let memory: MemoryStore | null = null;
  try {
    const { spillDir, stage } = work;
    const size = sizeRun(o, true);
    runLayout = size.layout;
    // Before any work: room on the disks for what the run will write.
    checkFreeSpace(spaceNeed(o, size, spillDir, stage));

    // ---- scatter ----
    memory = memoryStoreOf(o, size);
    const scattered = await runScatterStage({ o, format, secrets, size, spillDir, t0, memory, layout: runLayout });
    lanes = scattered.lanes;
    const { sc } = scattered;
    timings.scatterMs = Date.now() - t0;
    const tPlan = Date.now();

    // ---- plan: quotas, expected counts, the tolerance check, before anything is written ----
    const { planned, layout, worst, plan, planPath, warnings } = await planStage({
      o,
      format,
      size,
      sc,
      secrets,
      cellKeyInHeader: scattered.cellKeyInHeader,
      dir: spillDir,
      withLanes: (use) => use(lanes),
      progress: progress('plan', sc.records),
    });
    const { records, d, deal } = planned;
    if (sc.census) {
      // The groups are counted: the census spill is read no more.
      const census = sc.census;
      const { ranges } = spillRanges(census.buckets);
      for (let r = 0; r < ranges; r++) census.releaseRange(r);
      await work.removeEarly(Array.from({ length: ranges }, (_, r) => census.rangeFiles(r)).flat());
    }
    // Whole groups: sizes follow the groups; said before anything is written (see size-check.ts).
    for (const w of warnings) o.onNotice?.(w);
    timings.planMs = Date.now() - tPlan;
    const tGather = Date.now();

    // ---- gather: buckets dealt in order into the parts, then their statistics ----
    const { counts, fingerprints, closed, stats, splits: splitCount } = await gatherIntoParts({
      o,
      size,
      sc,
      localToGlobal: d.localToGlobal,
      plan,
      planPath,
      layout,
      header: headerBytes(sc.schema, o.foldColumn, format),
      stage,
      spillDir,
      lanes,
      work,
      progress: (stage) => progress(stage, records),
      onSplit: () => {
        splits++;
        runLayout = 'multi-pass';
      },
      timings,
    });
    lanes = null;
    timings.gatherMs = Date.now() - tGather;

    // ---- manifest, then the commit that makes the output visible ----
    const outFp = checkSameRecords(fingerprints, sc.fingerprint, 'please report this.');
    const rejected = scattered.rejects.file();
    timings.totalMs = Date.now() - t0;
    const placement = sc.spill.placement();
    const manifest = buildManifest({
      version: VERSION,
      options: o,
      format,
      schema: sc.schema,
      inputs: sc.inputs.map((x) => ({ ...x, rejected: scattered.rejects.perFile.get(x.path === '-' ? '<stdin>' : x.path) ?? 0 })),
      records,
      rejected: scattered.rejects.count,
      rejectsFile: rejected !== null ? 'rejected.csv' : null,
      strataKeys: d.strataKeys,
      strataSizes: d.strataSizes,
      binEdges: scattered.binEdges,
      deal,
      buckets: size.buckets,
      threads: size.threads,
      layout: ranLayout(size, placement, splitCount),
      memory: { budget: o.memory, isDefault: o.memoryIsDefault, splits: splitCount },
      spillBytes: placement,
      parts: partRecords(layout, counts, deal.folds, plan.strataCount, closed, fingerprints, stats?.parts ?? null),
      deviation: { max: worst.deviation, kind: worst.kind, part: worst.unit, stratum: worst.stratum },
      fingerprints: { input: sc.fingerprint.toHex(), output: outFp.toHex() },
      timings,
      ...(stats ? { inputStats: stats.input } : {}),
      host: hostInfo(),
    });
    if (stage === null) return { manifest, out, report: null, warnings };
    if (rejected !== null) writeOutputFile(join(stage, 'rejected.csv'), rejected, 'writing the rejected records');
    writeOutputFile(join(stage, 'manifest.json'), JSON.stringify(manifest, null, 2) + '\n', 'writing the manifest');
    // The report goes in before the commit, so a run that fails here leaves nothing behind.
    if (o.report) writeManifestReport(stage, manifest, basename(out));
    // Into place: never over anything that appeared meanwhile, the manifest last (see output-folder.ts).
    work.commit();
    return { manifest, out, report: o.report ? join(out, REPORT_FILE) : null, warnings };
  } catch (err) {
    // A JSON Lines record with the fold column's key: the reader does not know how the caller
    // names the option; said here.
    if (err instanceof RowdeckError && err.code === 'RDK_OPTION' && err.details.option === 'foldColumn' && err.message.endsWith('otherwise.')) {
      throw new RowdeckError(err.code, `${err.message.slice(0, -1)} (${optionSetting(o.surface, 'foldColumn', 'NAME')}).`, err.details);
    }
    // A fault of the environment met anywhere above: coded, with its path and operation.
    throw codedSystemError(err);
  } finally {
    if (lanes) await lanes.destroy().catch(() => {});
    // No thread reads the memory layout's files any more.
    memory?.close();
    await work.finish();
  }
}

/**
 * The gather step of a run on one machine: the parts opened, every bucket dealt in order into
 * them (gather-stage.ts; the spill removed a range at a time behind it), spread order written,
 * the parts closed, and `--stats` taken from the lanes or read back. The lanes are finished and
 * destroyed on success; on failure the parts are abandoned and the caller destroys the lanes.
 */
async function gatherIntoParts(a: {
  o: ReturnType<typeof resolveShuffleOptions>;
  size: RunSize;
  sc: Awaited<ReturnType<typeof runScatterStage>>['sc'];
  localToGlobal: number[];
  plan: GatherPlan;
  planPath: string;
  layout: PartInfo[];
  header: Buffer | null;
  stage: string | null;
  spillDir: string;
  lanes: ShuffleLanes | null;
  work: RunWork;
  progress: (stage: 'gather' | 'order' | 'stats') => (done: number, total: number) => void;
  onSplit: () => void;
  timings: Record<string, number>;
}): Promise<{ counts: Float64Array; fingerprints: Fingerprint[]; closed: { bytes: number; sha256: string }[]; stats: PartStatistics | null; splits: number }> {
  const { o, size, sc, plan, layout, stage } = a;
  const parts = layout.length;
  let writers = await openParts(stage, layout, o, a.header, a.spillDir);
  try {
    const spread = o.order === 'spread' ? new SpreadParts(a.spillDir, parts, plan.strataCount) : null;
    const { perRange } = spillRanges(size.buckets);
    let removing: Promise<void> = Promise.resolve();
    const gathered = await runGatherStage({
      plan,
      planPath: a.planPath,
      piecesOf: (b) => sc.spill.pieces(b),
      countsOf: (b, running) => {
        for (let l = 0; l < sc.strata.length; l++) running[a.localToGlobal[l]!]! += sc.bucketCounts[l]![b]!;
      },
      first: 0,
      end: size.buckets,
      rankStart: new Float64Array(plan.strataCount),
      lanes: a.lanes,
      inFlight: size.inFlight,
      sink: spread ? spreadSink(spread) : writerSink(writers),
      // Buckets are dealt in order: past the last bucket of a range, no task reads its files
      // (or slabs) again. The removal runs beside the dealing; the previous range's is waited for
      // here, so the spill never lags more than a range behind.
      passed: async (next) => {
        if (next % perRange !== 0 && next !== size.buckets) return;
        const r = Math.floor((next - 1) / perRange);
        sc.spill.releaseRange(r);
        await removing;
        removing = a.work.removeEarly(sc.spill.rangeFiles(r));
      },
      progress: a.progress('gather'),
      split: { cap: size.bucketCap, target: size.bucketTarget, dir: a.spillDir, bufferBytes: Math.floor(o.memory / 4), onSplit: a.onSplit },
    });
    const { counts, fingerprints } = gathered;
    if (spread) await writeSpreadParts(spread, writers, counts, plan.deal.folds, plan.strataCount, a.progress('order'));
    const closed = await closeParts(writers);
    writers = [];
    const tStats = Date.now();
    const stats = o.stats
      ? await partStatistics({
          columns: sc.schema.columns,
          partCount: parts,
          statsInLanes: plan.statsInLanes,
          excludeValues: o.excludeValues,
          lanes: gathered.lanes,
          inline: gathered.inline,
          files: stage === null ? null : layout.map((part) => join(stage, part.path)),
          headerLength: a.header?.length ?? 0,
          threads: size.threads,
          progress: a.progress('stats'),
        })
      : (await gathered.lanes.finish(), null);
    if (o.stats && !plan.statsInLanes) a.timings.statsMs = Date.now() - tStats;
    await gathered.lanes.destroy();
    if (gathered.phases.length) ['read', 'index', 'sort', 'deal', 'copy', 'fingerprint'].forEach((name, k) => (a.timings[`gather.${name}Ms`] = Math.round(gathered.phases[k] ?? 0)));
    return { counts, fingerprints, closed, stats, splits: gathered.splits };
  } finally {
    for (const w of writers) w.abandon();
  }
}

/** What the run expects to write, and where (see disk-space.ts). */
export function spaceNeed(o: ReturnType<typeof resolveShuffleOptions>, size: RunSize, spillDir: string, stage: string | null): Parameters<typeof checkFreeSpace>[0] {
  // A stream's size is not known before it ends: nothing to check against.
  const known = !o.inputs.some(isStreamInput);
  const input = known ? o.inputs.reduce((a, p) => a + estimateInputBytes(p), 0) : 0;
  const parts = input * (o.gzip ? 1 / 3 : 1) * (o.order === 'spread' ? 2 : 1);
  // The store keeps the spill's first chunks in memory; only the rest needs the disk.
  return { spillDir, spillBytes: size.layout === 'memory' || !known ? 0 : Math.max(0, size.spillEstimate - size.storeBytes), outDir: stage, partBytes: parts, out: o.out };
}

/**
 * The stores of the memory layout and of a one-process spill layout (none where the budget
 * leaves nothing): the allowance all scatter tasks draw on; where they are shared
 * memory, in slabs of about 1/16 of a range's share of a task (so that slabs left part full
 * waste little of it).
 */
function memoryStoreOf(o: ReturnType<typeof resolveShuffleOptions>, size: RunSize): MemoryStore | null {
  if (size.storeBytes <= 0) return null;
  const tasks = Math.max(1, size.threads);
  const share = size.spillEstimate / (tasks * Math.min(size.buckets, SPILL_FILES) * 16);
  const slabBytes = Math.min(64 << 20, Math.max(1 << 20, 2 ** Math.floor(Math.log2(Math.max(1, share)))));
  // Group mode with records placed individually keeps a census spill too (scatter-stage.ts).
  const census = o.assign === 'group' && placesRecordsIndividually(o) ? spillRanges(2 ** Math.max(0, size.bits - 2)).ranges : 0;
  // A memory file system is taken where it has room for the spill expected (with a margin); the allowance stays the budget's.
  return openMemoryStore(tasks, spillRanges(size.buckets).ranges, census, size.storeBytes, slabBytes, Math.min(size.storeBytes, Math.ceil(1.25 * size.spillEstimate)));
}

/** The layout that ran: the memory layout where no chunk went to a file (a spill layout's store may have held them all); multi-pass where a bucket was split. */
function ranLayout(size: RunSize, placement: { memory: number; files: number }, splits: number): Layout {
  if (splits > 0) return 'multi-pass';
  if (placement.files === 0 && (size.layout === 'memory' || placement.memory > 0)) return 'memory';
  return 'spill';
}

/** Writes a whole file of the output; a failure (a full disk) is a coded error naming it. */
function writeOutputFile(path: string, text: string, doing: string): void {
  try {
    writeFileSync(path, text, { flag: 'wx' });
  } catch (err) {
    throw systemError(err, path, doing);
  }
}
