/**
 * `shuffle()`: the whole job, stage by stage.
 *
 *   inputs ─▶ scatter (worker threads) ─▶ spill buckets + counts ─▶ plan (quotas, tolerance check)
 *          ─▶ gather (worker pool, one bucket per task) ─▶ ordered part writers ─▶ manifest
 *          ─▶ rename the finished folder into place
 *
 * Output goes to a hidden staging folder and is put into place only after the manifest is
 * written (src/io/output-folder.ts), so a failed or killed run never leaves a folder that looks
 * complete. Spill files live in their own hidden folder, removed on success and on failure
 * (src/engine/run-work.ts).
 */
import { closeSync, mkdirSync, openSync, readSync, statSync, writeFileSync } from 'node:fs';
import { basename, dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { existsSync } from 'node:fs';
import { cpus, hostname, totalmem } from 'node:os';
import { stringify } from 'csv-stringify/sync';
import pLimit from 'p-limit';
import { buildDealTable, countCells, seededStarts, type DealSpec } from '../core/deal.js';
import { deriveSecret, Fingerprint } from '../core/hash.js';
import { maxDeviation, orderStrata, placeGroups } from '../core/balance.js';
import type { GroupTable, GroupTableData } from '../core/group-table.js';
import { GroupTableBuilder, writeGroupsFile } from './group-census.js';
import { RowdeckError, codedSystemError, systemError } from '../errors.js';
import type { InputFormat, RejectedRecord } from '../io/batch.js';
import { estimateInputBytes, isStreamInput } from '../io/input.js';
import { chooseFormat } from '../io/sniff.js';
import { FileSlots, PartWriter } from '../io/part-writer.js';
import { choosePartFileSlots } from '../io/open-files.js';
import { checkInputs, startRunWork, type RunWork } from './run-work.js';
import { groupSizeWarnings, unitSizes } from './size-check.js';
import { TableStats, type ColumnSummary } from '../core/stats.js';
import { optionName, optionSetting, resolveShuffleOptions, type ResolvedShuffleOptions, type ShuffleOptions } from '../options.js';
import { addCounts, censusBucket, type CensusTask, type GatherResult, type GatherTask } from './gather.js';
import { partCount, type GatherPlan } from './plan.js';
import { censusDir, scatter, scatterTaskConfig, stratumValues, type ScatterLanes, type ScatterMessage, type ScatterOptions, type ScatterResult, type ScatterTaskResult } from './scatter.js';
import type { BlockReply } from '../io/blocks.js';
import { computeBinEdges, type BinEdges } from './quantiles.js';
import { buildManifest, type Manifest, type PartRecord } from './manifest.js';
import { gatherLane, type GatherFinal, type GatherLane } from './gather-lane.js';
import { statsInLanes, type PartStatsResult, type PartStatsTask } from './part-stats.js';
import { HEADER_BYTES, spillRanges } from './spill.js';
import { SpreadParts } from './spread-parts.js';
import { InlineLanes, WorkerLanes, type Lanes } from '../workers/lanes.js';
import { VERSION } from '../version.js';
import { REPORT_FILE, writeManifestReport } from '../report/file.js';

/** Where the compiled worker lives: beside this module in dist/, or dist/ when running from src/. */
export function resolveWorkerFile(name = 'shuffle-worker.js'): string {
  const here = dirname(fileURLToPath(import.meta.url));
  const beside = join(here, '..', 'workers', name);
  if (existsSync(beside)) return beside;
  const built = join(here, '..', '..', 'dist', 'workers', name);
  if (existsSync(built)) return built;
  throw new RowdeckError('ERR_INTERNAL', `worker module not found at ${beside}; run "npm run build" first.`);
}

const EXT: Record<InputFormat, string> = { csv: '.csv', tsv: '.tsv', jsonl: '.jsonl' };

/**
 * At most this much buffer per bucket and scatter task. A quarter of the budget used to be spread
 * over the buckets whatever the input's size (64 MiB a task with the default 512 MiB), and stage
 * 1 wrote every byte of it for the first time: a page first touched costs the kernel a fault
 * (~12 µs on the benchmark machine, a virtual machine), 16 k of them a task. Past 64 KiB a
 * bigger buffer does not make the spill's writes faster (64 KiB writes ran at ~4.6 GB/s here),
 * so small and medium inputs now touch far less memory: on the 100 MB and 200 MB files stage 1
 * took 0.65-1.14 s against 0.96-1.46 s, in 3 interleaved rounds each. The 1 GB file already had
 * 64 KiB a task (1,024 buckets).
 */
export const BUFFER_CAP = 64 * 1024;

/**
 * How many spill buckets, and how much buffer each gets in stage 1.
 * - A bucket and its output, for every task in flight, must fit the memory budget.
 * - Stage 1 keeps a buffer per bucket and scatter task: many buckets scatter records over many
 *   places in memory, which costs (with 2,048 buckets stage 1 took 60% longer than with 512 on
 *   a 1 GB input); below ~32 KiB per buffer the writes get small, so a small budget gets larger
 *   buckets instead.
 * - Stage 2 reads a bucket in key order, jumping around it; smaller buckets stay in cache.
 * Measured on the 1 GB benchmark file (2 cores), before stage 1 read in blocks: 128 buckets
 * 14.0 s, 256 14.1 s, 512 13.2 s, 2,048 24.6 s. Since then stage 1 no longer slows with the
 * bucket count (scatter 6.8-7.3 s from 64 to 2,048 buckets), while stage 2's key-order copy
 * slows sharply once a bucket falls out of cache (a random 92-byte copy costs 30-60 ns in cache,
 * 180-280 ns out of it; on this machine the step came past 1 MiB regions in some runs and past
 * 2 MiB in others, one worker alone: bench/micro/random-copy.mjs; two workers share the cache):
 * 512 buckets (~2.4 MiB) gathered in 5.4-6.0 s, 1,024 in
 * 4.4-5.5 s, 2,048 in 5.1 s (smaller reads). Hence a target of 1.5 MiB: buckets of 0.75-1.5 MiB.
 */
export function chooseBuckets(spillEstimate: number, memory: number, threads: number, inFlight: number): { bits: number; bufferBytes: number } {
  const memCap = Math.max(64 * 1024, Math.floor(memory / (3 * (inFlight + 1))));
  const target = Math.min(memCap, 1.5 * 1024 * 1024);
  const tasks = Math.max(1, threads);
  const byBuffers = Math.max(1, Math.floor(memory / 4 / (32 * 1024 * tasks)));
  let want = Math.ceil(spillEstimate / target);
  if (want > byBuffers) want = Math.max(byBuffers, Math.ceil(spillEstimate / memCap));
  let bits = Math.min(14, Math.max(0, Math.ceil(Math.log2(Math.max(1, want)))));
  // For experiments only: force the bucket bits (the output does not depend on them).
  if (process.env.ROWDECK_BUCKET_BITS) bits = Number(process.env.ROWDECK_BUCKET_BITS);
  const bufferBytes = Math.max(4096 * tasks, Math.min(BUFFER_CAP * tasks, Math.floor(memory / 4 / 2 ** bits)));
  return { bits, bufferBytes };
}

/**
 * The spill's size over the input's: each record gains a 24-byte header and up to 3 bytes of
 * padding, ~1.3× for the benchmark's ~93-byte records, but 14× for records of 2 bytes. Guessing
 * 1.3 there gave buckets 10 times too large, and stage 2 held them past the budget (20 MB of
 * 1-byte values at --memory 64MiB: 496 MiB). Estimated from the first MiB of the first input that
 * can be read without decompressing (line ends counted, quotes not considered: a guess for the
 * bucket count only, which the output does not depend on); 1.3 otherwise.
 */
export function spillFactor(inputs: string[]): number {
  const path = inputs.find((p) => !isStreamInput(p));
  if (path === undefined) return 1.3;
  let fd = -1;
  try {
    fd = openSync(path, 'r');
    const head = Buffer.allocUnsafe(1 << 20);
    const got = readSync(fd, head, 0, head.length, 0);
    if (got < 2 || (head[0] === 0x1f && head[1] === 0x8b)) return 1.3;
    let lines = 0;
    for (let at = head.indexOf(10, 0); at >= 0 && at < got; at = head.indexOf(10, at + 1)) lines++;
    const perRecord = got / Math.max(1, lines);
    return Math.max(1.3, (perRecord + HEADER_BYTES + 3) / perRecord);
  } catch {
    return 1.3;
  } finally {
    if (fd >= 0) closeSync(fd);
  }
}

/**
 * Size of the blocks workers parse in stage 1: about 1/32 of the budget (4 per worker are held,
 * each with its records' positions), between 256 KiB and 4 MiB.
 */
export function blockBytesFor(memory: number): number {
  return Math.max(256 * 1024, Math.min(4 * 1024 * 1024, 2 ** Math.floor(Math.log2(memory / 32))));
}

/** Removes the work folders of dead runs in `dir` (see src/io/work-folders.ts). */
export { removeStaleWorkFolders } from '../io/work-folders.js';

export interface PartInfo {
  path: string;
  split: string | null;
  partition: number;
}

export function partLayout(o: ResolvedShuffleOptions, format: InputFormat): PartInfo[] {
  const ext = EXT[format] + (o.gzip ? '.gz' : '');
  const named = o.splits.length > 1;
  const parts: PartInfo[] = [];
  for (const s of o.splits) {
    for (let p = 0; p < o.partitions; p++) {
      const file = `part-${String(p).padStart(5, '0')}${ext}`;
      if (!named) parts.push({ path: file, split: null, partition: p });
      else if (o.partitions === 1) parts.push({ path: `${s.name}${ext}`, split: s.name, partition: 0 });
      else parts.push({ path: `${s.name}/${file}`, split: s.name, partition: p });
    }
  }
  return parts;
}

/** Resolves '*' (the rest) and checks that record counts fit the input. */
function resolveSplitWeights(o: ResolvedShuffleOptions, records: number): DealSpec['splits'] {
  if (!o.splitsAreCounts) return o.splits;
  const given = o.splits.reduce((a, s, i) => (i === o.restSplit ? a : a + s.weight), 0);
  if (o.restSplit >= 0) {
    if (given > records) {
      throw new RowdeckError('ERR_SPLIT_SIZES', `${optionName(o.surface, 'split')} asks for ${given} records before "*", but the input has ${records}. Lower the counts.`);
    }
    return o.splits.map((s, i) => (i === o.restSplit ? { name: s.name, weight: records - given } : s));
  }
  if (given !== records) {
    throw new RowdeckError(
      'ERR_SPLIT_SIZES',
      `${optionName(o.surface, 'split')} counts add up to ${given}, but the input has ${records} records. Make them add up, give one split as * (the rest), or use fractions such as 0.8.`,
    );
  }
  return o.splits;
}

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
  const hashOnly = how.sink === 'hash';
  checkInputs(o.inputs);
  const format = await chooseFormat(o.inputs, o.format, (v) => optionSetting(o.surface, 'format', v));
  const secret = deriveSecret(o.seed);
  const cellSecret = deriveSecret(`${o.seed}\u0000cell`);
  const rankSecret = deriveSecret(`${o.seed}\u0000rank`);

  const work: RunWork = startRunWork({
    out: hashOnly ? null : o.out,
    force: o.force,
    inputs: o.inputs,
    tempDir: o.tempDir,
    ...(how.spillBeside !== undefined ? { spillBeside: how.spillBeside } : {}),
    notice: o.onNotice,
  });
  const out = work.claim?.out ?? o.out;
  let pool: Lanes<GatherTask, GatherResult, GatherFinal> | null = null;
  const writers: PartWriter[] = [];
  try {
    const spillDir = work.spillDir;
    const stage = work.stage;

    // 0 threads (small inputs by default, see resolveShuffleOptions): all on this thread.
    const threads = o.threads;
    const inFlight = 2 * Math.max(1, threads) + 2;
    const factor = spillFactor(o.inputs);
    const estimate = o.inputs.reduce((a, p) => a + estimateInputBytes(p), 0) * factor;
    const { bits, bufferBytes: spillBuffer } = chooseBuckets(estimate, o.memory, threads, inFlight);
    const buckets = 2 ** bits;

    // Rejected records (quarantine) go to a CSV file inside the output folder.
    const rejects: string[] = [];
    const rejectedPerFile = new Map<string, number>();
    const onReject = o.onBadRecord === 'fail' ? undefined : (r: RejectedRecord): void => {
      rejectedPerFile.set(r.file, (rejectedPerFile.get(r.file) ?? 0) + 1);
      if (o.onBadRecord === 'quarantine') {
        rejects.push(stringify([[r.file, r.line, r.code, r.reason, r.bytes.toString('utf8')]]));
      }
    };

    // Quantile bins need their edges before any record can be given a stratum.
    let binEdges: BinEdges[] = [];
    const binCols = o.stratify.filter((c) => c.bins > 0);
    if (binCols.length > 0) {
      binEdges = await computeBinEdges({
        inputs: o.inputs,
        format,
        delimiter: o.delimiter ?? undefined,
        header: o.header,
        onBadRecord: o.onBadRecord,
        columns: binCols,
        secret,
        memory: o.memory,
      });
    }

    // ---- stage 1: scatter ----
    const cellKeyInHeader = o.assign !== 'exact' && o.order !== 'grouped';
    if (cellKeyInHeader && o.assign === 'group') mkdirSync(censusDir(spillDir));
    // Unknown (0: no bar) when any input is a stream: its size is not known before it ends.
    const totalBytes = o.inputs.some(isStreamInput) ? 0 : o.inputs.reduce((a, p) => a + statSync(p).size, 0);
    const scatterOptions: ScatterOptions = {
      inputs: o.inputs,
      format,
      delimiter: o.delimiter ?? undefined,
      header: o.header,
      onBadRecord: o.onBadRecord,
      onReject,
      stratify: o.stratify.map((s) => s.name),
      bins: o.stratify.map((s) => binEdges.find((b) => b.column === s.name && s.bins > 0)?.edges ?? null),
      key: o.key,
      group: o.group,
      secret,
      spillDir,
      threads,
      onSchema: (schema) => {
        if (o.foldColumn !== null && schema.columns.includes(o.foldColumn)) {
          throw new RowdeckError(
            'ERR_OPTION',
            `Invalid option ${optionName(o.surface, 'foldColumn')}: the input already has a column named "${o.foldColumn}". Name the added column otherwise (${optionSetting(o.surface, 'foldColumn', 'NAME')}).`,
            { option: 'foldColumn', column: o.foldColumn },
          );
        }
      },
      ...(format === 'jsonl' && o.foldColumn !== null ? { refuseKey: o.foldColumn } : {}),
      bits,
      bufferBytes: spillBuffer,
      // Short records (a spill over 1.5x the input): smaller blocks, since a block's record
      // positions (~40 bytes a record) then outweigh its bytes.
      blockBytes: factor <= 1.5 ? blockBytesFor(o.memory) : Math.max(64 * 1024, Math.floor((blockBytesFor(o.memory) * 1.3) / factor)),
      // Hash mode: cells follow from keys alone, so stage 1 can count them on the way.
      hashCells: o.assign === 'hash' ? { deal: { splits: o.splits, exactCounts: false, partitions: o.partitions, folds: o.folds }, cellSecret: Array.from(cellSecret) } : null,
      // Group and hash modes place records individually inside their part unless asked to keep a
      // group's records together (see ScatterTaskConfig.cellKeyInHeader); the census buckets
      // hold a quarter as many records as the spill's, 24 bytes each.
      cellKeyInHeader: cellKeyInHeader ? { censusBits: o.assign === 'group' ? Math.max(0, bits - 2) : null, censusBufferBytes: spillBuffer } : null,
      onProgress: (done, records) => o.onProgress?.({ stage: 'scatter', done, total: totalBytes, records, elapsedMs: Date.now() - t0 }),
    };
    // The same threads do both stages (shuffle-worker.ts): started here, kept for stage 2.
    let lanes: WorkerLanes<ScatterMessage | GatherTask, BlockReply | GatherResult, ScatterTaskResult | GatherFinal> | null = null;
    if (threads > 0) {
      lanes = new WorkerLanes(resolveWorkerFile(), threads, scatterTaskConfig(scatterOptions));
      pool = lanes as unknown as Lanes<GatherTask, GatherResult, GatherFinal>;
      scatterOptions.lanes = lanes as unknown as ScatterLanes;
    }
    const sc: ScatterResult = await scatter(scatterOptions);
    timings.scatterMs = Date.now() - t0;
    const tPlan = Date.now();

    // ---- plan ----
    const order = orderStrata(sc.strata, secret);
    const localToGlobal = new Array<number>(sc.strata.length);
    order.forEach((local, g) => (localToGlobal[local] = g));
    // Each scatter task's own stratum ids, straight to the dealing order.
    const taskToDealing = sc.taskStrata.map((ids) => ids.map((u) => localToGlobal[u]!));
    const strataKeys = order.map((l) => sc.strata[l]!);
    const strataSizes = order.map((l) => sc.bucketCounts[l]!.reduce((a, b) => a + b, 0));
    const records = sc.records;
    if (records === 0) throw new RowdeckError('ERR_INPUT_EMPTY', `${o.inputs.join(', ')}: no records to shuffle (every record was rejected).`);
    const deal: DealSpec = {
      splits: resolveSplitWeights(o, records),
      exactCounts: o.splitsAreCounts,
      partitions: o.partitions,
      folds: o.folds,
    };
    const table = buildDealTable(strataSizes, deal, seededStarts(secret, deal.splits.length), rankSecret);
    const parts = partCount(deal);
    const K = deal.folds;
    const cells = parts * K;
    const nStrata = strataKeys.length;
    // Expected per-(cell, stratum) counts, known before anything is written.
    let cellCounts: Float64Array;
    let groupsFile: string | null = null;
    let groupStarts: number[] | null = null;
    let groupCount = 0;
    if (o.assign === 'exact') {
      cellCounts = countCells(table); // [s * cells + cell]
      cellCounts = transpose(cellCounts, nStrata, cells);
    } else if (o.assign === 'hash') {
      cellCounts = new Float64Array(cells * nStrata);
      sc.cellCounts!.forEach((counts, u) => counts.forEach((n, cell) => (cellCounts[cell * nStrata + localToGlobal[u]!]! += n)));
    } else {
      // The groups, counted bucket by bucket from the spill (on the lanes): in key order, since
      // buckets are ranges of keys and each bucket's groups come sorted.
      const census = new GroupTableBuilder(join(spillDir, 'groups-census.bin'));
      let groups: GroupTable;
      try {
        let counted = 0;
        const lanes = pool as unknown as Lanes<CensusTask, GroupTableData, GatherFinal> | null;
        // Groups are counted from the census spill where the spill is keyed by record (see
        // ScatterTaskConfig.cellKeyInHeader), else from the spill itself.
        const censusPieces = sc.censusPieces ?? sc.bucketPieces;
        const censusBits = sc.censusPieces ? Math.log2(censusPieces.length) : bits;
        await eachAtOnce(censusPieces.length, Math.max(1, threads) * 2, async (b) => {
          const task: CensusTask = { census: b, pieces: censusPieces[b]!, strata: taskToDealing, bits: censusBits };
          if (threads === 0 || !lanes) {
            census.add(b, censusBucket(task));
            // On this thread: let signals (Ctrl-C cleans up) and progress in between buckets.
            await new Promise<void>((resolve) => setImmediate(resolve));
          } else census.add(b, await lanes.run(task));
          o.onProgress?.({ stage: 'plan', done: ++counted, total: censusPieces.length, records: sc.records, elapsedMs: Date.now() - t0 });
        });
        groups = census.build();
      } finally {
        census.close();
      }
      const n = groups.count;
      groupCount = n;
      const { hi, lo, records, first } = groups;
      const wsum = deal.splits.reduce((a, s) => a + s.weight, 0);
      const cellWeight: number[] = [];
      for (const s of deal.splits) for (let c = 0; c < deal.partitions * K; c++) cellWeight.push(s.weight / wsum / (deal.partitions * K));
      const placed = placeGroups(groups, strataSizes, cellWeight);
      cellCounts = new Float64Array(cells * nStrata);
      for (let g = 0; g < n; g++) {
        if (groups.extra.has(g)) for (const [s, m] of groups.strataOf(g)) cellCounts[placed[g]! * nStrata + s]! += m;
        else cellCounts[placed[g]! * nStrata + first[g]!]! += records[g]!;
      }
      // Sorted (hi, lo) -> cell table for the workers, written from the table's arrays.
      groupsFile = 'groups.bin';
      writeGroupsFile(join(spillDir, groupsFile), hi, lo, placed);
      if (!cellKeyInHeader) {
        // Keys in order, so each bucket's groups (its keys' top bits) are a run of the file.
        groupStarts = new Array<number>(buckets + 1).fill(0);
        for (let k = 0; k < n; k++) groupStarts[(bits === 0 ? 0 : hi[k]! >>> (32 - bits)) + 1]!++;
        for (let b = 0; b < buckets; b++) groupStarts[b + 1]! += groupStarts[b]!;
      }
      // The census spill is no longer needed.
      if (sc.censusPieces) await work.removeEarly([...new Set(sc.censusPieces.flat().map((p) => p.path))]);
    }

    // Tolerance: parts (files), and folds within each split.
    const partStrata = new Float64Array(parts * nStrata);
    for (let c = 0; c < cells; c++) for (let s = 0; s < nStrata; s++) partStrata[Math.floor(c / K) * nStrata + s]! += cellCounts[c * nStrata + s]!;
    const layout = partLayout(o, format);
    const partDev = maxDeviation(partStrata, parts, strataSizes);
    let foldDev = { deviation: 0, unit: -1, stratum: -1 };
    if (K > 1) {
      const S = deal.splits.length;
      const foldStrata = new Float64Array(S * K * nStrata);
      for (let c = 0; c < cells; c++) {
        const split = Math.floor(c / (deal.partitions * K));
        const f = c % K;
        for (let s = 0; s < nStrata; s++) foldStrata[(split * K + f) * nStrata + s]! += cellCounts[c * nStrata + s]!;
      }
      foldDev = maxDeviation(foldStrata, S * K, strataSizes);
    }
    const worst = foldDev.deviation > partDev.deviation ? { ...foldDev, kind: 'fold' as const } : { ...partDev, kind: 'part' as const };
    // Hash mode enforces no tolerance: its shares are what the keys give (reported, see the summary).
    if (o.assign !== 'hash' && worst.deviation > o.tolerance + 1e-12) {
      throw toleranceError(o, worst, strataKeys, strataSizes, layout, deal, records);
    }
    // Whole groups: sizes follow the groups; said before anything is written (see size-check.ts).
    const warnings: string[] = [];
    if (o.assign === 'group') {
      const cellTotals = new Float64Array(cells);
      for (let c = 0; c < cells; c++) for (let s = 0; s < nStrata; s++) cellTotals[c]! += cellCounts[c * nStrata + s]!;
      for (const w of groupSizeWarnings(unitSizes(cellTotals, deal, layout.map((p) => p.path)), groupCount, o.tolerance, o.surface === 'cli' ? `--group ${o.group!}` : `group ${JSON.stringify(o.group)}`)) {
        warnings.push(w);
        o.onNotice?.(w);
      }
    }

    const plan: GatherPlan = {
      version: 1,
      bits,
      buckets,
      scatterTasks: sc.taskStrata.length,
      format,
      delimiter: sc.schema.delimiter,
      lineEnding: sc.schema.lineEnding,
      mode: o.assign,
      order: o.order,
      cellKeyInHeader,
      deal,
      foldColumn: o.foldColumn,
      strataCount: nStrata,
      localToGlobal: taskToDealing,
      quota: Array.from(table.quota),
      cumQuota: Array.from(table.cumQuota),
      offset: Array.from(table.offset),
      cellSecret: Array.from(cellSecret),
      rankSecret: Array.from(rankSecret),
      groupsFile,
      groupStarts,
      statsColumns: o.stats ? sc.schema.columns : [],
      statsInLanes: o.stats && statsInLanes(sc.schema.columns.length, partCount(deal), threads, o.memory),
      excludeValues: o.excludeValues,
    };
    const planPath = join(spillDir, 'plan.json');
    writeFileSync(planPath, JSON.stringify(plan));
    timings.planMs = Date.now() - tPlan;
    const tGather = Date.now();

    // ---- stage 2: gather ----
    if (stage !== null) {
      for (const part of layout) {
        const folder = dirname(join(stage, part.path));
        try {
          mkdirSync(folder, { recursive: true });
        } catch (err) {
          throw systemError(err, folder, 'creating a folder for the parts');
        }
      }
    }
    // Short slices (many parts) are gathered per part before they are written: up to 64 KiB a
    // part, an eighth of the budget over all parts, at least 8 KiB (see PartWriter).
    const gatherBytes = Math.max(8 * 1024, Math.min(64 * 1024, Math.floor(o.memory / 8 / layout.length)));
    // Open files stay bounded whatever the part count (see FileSlots).
    const slots = new FileSlots(choosePartFileSlots());
    for (const part of layout) writers.push(new PartWriter(stage === null ? null : join(stage, part.path), o.gzip, gatherBytes, slots));
    const header = headerBytes(sc, o, format);
    if (header) for (const w of writers) await w.write(header);

    // Rank of each stratum's first record in a bucket: prefix sums over the buckets before it,
    // taken as the buckets are handed out (in order).
    const running = new Float64Array(nStrata);
    let ranked = 0;
    const rankStartOf = (b: number): Float64Array => {
      if (b !== ranked) throw new RowdeckError('ERR_INTERNAL', `bucket ${b} handed out before bucket ${ranked}`);
      const start = Float64Array.from(running);
      for (let l = 0; l < sc.strata.length; l++) running[localToGlobal[l]!]! += sc.bucketCounts[l]![b]!;
      ranked++;
      return start;
    };

    let inlineLane: GatherLane | null = null;
    if (threads === 0) {
      const lane = gatherLane(planPath);
      inlineLane = lane;
      pool = new InlineLanes<GatherTask, GatherResult, GatherFinal>((t) => lane.handle(t), () => lane.finish());
    }
    // Otherwise stage 1's threads deal the buckets; each reads plan.json with its first.
    if (!pool) throw new RowdeckError('ERR_INTERNAL', 'no lanes for stage 2');
    const counts = new Float64Array(parts * K * nStrata);
    const fps = Array.from({ length: parts }, () => new Fingerprint());
    // Statistics (--stats): each part's summary as soon as its figures are complete, and the
    // whole input's as the parts' merged (exact, so equal to one pass over the input).
    const partStats = o.stats && plan.statsInLanes ? Array.from({ length: parts }, () => new TableStats(sc.schema.columns)) : null;
    const allStats = o.stats ? new TableStats(sc.schema.columns) : null;
    const partSummaries: ColumnSummary[][] = [];
    const partDone = (p: number, t: TableStats): void => {
      partSummaries[p] = t.summary({ excludeValues: o.excludeValues });
      allStats!.merge(t);
    };
    // --order spread: each part's records kept class by class until the part is put in order.
    const spreadParts = o.order === 'spread' ? new SpreadParts(spillDir, parts, nStrata) : null;
    const pending = new Map<number, Promise<GatherResult>>();
    const phases: number[] = [];
    // Output buffers come back from the workers and are handed out again (see GatherTask.arena).
    const spare: ArrayBuffer[] = [];
    const submit = (b: number): void => {
      const task: GatherTask = { bucket: b, pieces: sc.bucketPieces[b]!, rankStart: rankStartOf(b) };
      const arena = spare.pop();
      if (arena) task.arena = arena;
      // The rank starts go over without a copy (with thousands of strata they are tens of KB a bucket).
      const p = pool!.run(task, arena ? [arena, task.rankStart.buffer as ArrayBuffer] : [task.rankStart.buffer as ArrayBuffer]);
      p.catch(() => {});
      pending.set(b, p);
    };
    let next = 0;
    const { perRange } = spillRanges(buckets);
    let removing: Promise<void> = Promise.resolve();
    // Stage 2 begins: the spill files are complete and closed.
    o.onProgress?.({ stage: 'gather', done: 0, total: buckets, records, elapsedMs: Date.now() - t0 });
    while (next < buckets && next < inFlight) submit(next++);
    for (let b = 0; b < buckets; b++) {
      const r = await pending.get(b)!;
      pending.delete(b);
      const data = Buffer.from(r.data.buffer, r.data.byteOffset, r.data.byteLength);
      if (spreadParts) spreadParts.add(data, r.partStart, r.spread!);
      for (let p = 0; p < parts; p++) {
        const a = r.partStart[p]!;
        const e = r.partStart[p + 1]!;
        if (!spreadParts && e > a) {
          const writing = writers[p]!.write(data.subarray(a, e));
          if (writing) await writing;
        }
        fps[p]!.merge(r.fingerprints[p]!);
      }
      addCounts(counts, r.counts);
      r.phases?.forEach((ms, k) => (phases[k] = (phases[k] ?? 0) + ms));
      spare.push(r.data.buffer as ArrayBuffer);
      // Buckets are dealt in order: past the last bucket of a range, no task reads its files again.
      // The removal runs beside the dealing; the previous range's is waited for here, so the
      // spill never lags more than a range behind.
      if ((b + 1) % perRange === 0 || b === buckets - 1) {
        await removing;
        removing = work.removeEarly(sc.rangeFiles[Math.floor(b / perRange)]!);
      }
      if (next < buckets) submit(next++);
      o.onProgress?.({ stage: 'gather', done: b + 1, total: buckets, records, elapsedMs: Date.now() - t0 });
    }
    if (spreadParts) {
      try {
        for (let p = 0; p < parts; p++) {
          const classCounts = new Float64Array(nStrata);
          for (let f = 0; f < K; f++) for (let st = 0; st < nStrata; st++) classCounts[st]! += counts[(p * K + f) * nStrata + st]!;
          await spreadParts.writePart(p, classCounts, writers[p]!);
          o.onProgress?.({ stage: 'order', done: p + 1, total: parts, records, elapsedMs: Date.now() - t0 });
        }
      } finally {
        spreadParts.close();
      }
    }
    const closed: { bytes: number; sha256: string }[] = [];
    for (const w of writers) closed.push(await w.close());
    writers.length = 0;
    if (allStats && !plan.statsInLanes) {
      const tStats = Date.now();
      // Too many parts for the lanes to keep every part's statistics: each part is read back,
      // one a lane at a time (see src/engine/part-stats.ts).
      const headerLength = header?.length ?? 0;
      if (stage === null) throw new RowdeckError('ERR_INTERNAL', 'statistics read back from parts that were not written');
      const tasks = layout.map((part): PartStatsTask => ({ partFile: join(stage, part.path), headerBytes: headerLength, excludeValues: o.excludeValues }));
      const statsLanes = pool as unknown as Lanes<PartStatsTask, PartStatsResult, GatherFinal>;
      let done = 0;
      o.onProgress?.({ stage: 'stats', done: 0, total: parts, records, elapsedMs: Date.now() - t0 });
      await eachAtOnce(parts, Math.max(1, threads), async (p) => {
        const t = inlineLane ? (await inlineLane.partStats(tasks[p]!)).result : await statsLanes.run(tasks[p]!);
        partSummaries[p] = t.summary;
        o.onProgress?.({ stage: 'stats', done: ++done, total: parts, records, elapsedMs: Date.now() - t0 });
      });
      timings.statsMs = Date.now() - tStats;
    }
    // Where the lanes kept them, every worker hands over the statistics of all the buckets it
    // dealt; where the parts were read back, its table of the parts it read. Merged in lane order
    // (the merge is exact, so the order does not change the result).
    const finals = await pool.finish();
    if (partStats) {
      for (const f of finals) if (f && 'parts' in f) f.parts.forEach((t, p) => partStats[p]!.mergeSerialized(t));
      partStats.forEach((t, p) => partDone(p, t));
    } else if (allStats) for (const f of finals) if (f && 'readBack' in f) allStats.mergeSerialized(f.readBack);
    await pool.destroy();
    pool = null;
    timings.gatherMs = Date.now() - tGather;
    if (phases.length) ['read', 'index', 'sort', 'deal', 'copy', 'fingerprint'].forEach((name, k) => (timings[`gather.${name}Ms`] = Math.round(phases[k] ?? 0)));

    if (rejects.length > 0 && stage !== null) {
      writeOutputFile(join(stage, 'rejected.csv'), stringify([['file', 'line', 'code', 'reason', 'record']]) + rejects.join(''), 'writing the rejected records');
    }

    // ---- manifest, then the rename that makes the output visible ----
    const partRecords: PartRecord[] = layout.map((part, p) => {
      const strata = new Array<number>(nStrata).fill(0);
      const folds = new Array<number>(K).fill(0);
      const foldStrata: number[][] = Array.from({ length: K }, () => new Array<number>(nStrata).fill(0));
      for (let f = 0; f < K; f++) {
        for (let s = 0; s < nStrata; s++) {
          const n = counts[(p * K + f) * nStrata + s]!;
          strata[s]! += n;
          folds[f]! += n;
          foldStrata[f]![s] = n;
        }
      }
      return {
        path: part.path,
        split: part.split,
        partition: part.partition,
        records: strata.reduce((a, b) => a + b, 0),
        bytes: closed[p]!.bytes,
        sha256: closed[p]!.sha256,
        strata,
        folds: K > 1 ? folds : null,
        foldStrata: K > 1 ? foldStrata : null,
        fingerprint: fps[p]!.toHex(),
        ...(allStats ? { stats: partSummaries[p]! } : {}),
      };
    });
    const inputStats = allStats ? allStats.summary({ excludeValues: o.excludeValues }) : undefined;
    const outFp = new Fingerprint();
    for (const f of fps) outFp.merge(f);
    // Stage 2 hashes the records it read back from the spill; their sum must be what stage 1
    // read from the inputs (every record dealt to exactly one part, the spill intact). Never
    // write a manifest that says otherwise.
    if (outFp.toHex() !== sc.fingerprint.toHex() || outFp.count !== sc.fingerprint.count) {
      throw new RowdeckError(
        'ERR_INTERNAL',
        `the parts hold ${outFp.count} records (fingerprint ${outFp.toHex()}) but ${sc.fingerprint.count} were read (fingerprint ${sc.fingerprint.toHex()}). Nothing was written; please report this.`,
      );
    }
    timings.totalMs = Date.now() - t0;
    const manifest = buildManifest({
      version: VERSION,
      options: o,
      format,
      schema: sc.schema,
      inputs: sc.inputs.map((x) => ({ ...x, rejected: rejectedPerFile.get(x.path === '-' ? '<stdin>' : x.path) ?? 0 })),
      records,
      rejected: [...rejectedPerFile.values()].reduce((a, b) => a + b, 0),
      rejectsFile: rejects.length > 0 ? 'rejected.csv' : null,
      strataKeys,
      strataSizes,
      binEdges,
      deal,
      buckets,
      threads,
      parts: partRecords,
      deviation: { max: worst.deviation, kind: worst.kind, part: worst.unit, stratum: worst.stratum },
      fingerprints: { input: sc.fingerprint.toHex(), output: outFp.toHex() },
      timings,
      ...(inputStats !== undefined ? { inputStats } : {}),
      host: { hostname: hostname(), cpus: cpus().length, cpuModel: cpus()[0]?.model ?? 'unknown', memory: totalmem(), node: process.version },
    });
    if (stage === null) return { manifest, out, report: null, warnings };
    writeOutputFile(join(stage, 'manifest.json'), JSON.stringify(manifest, null, 2) + '\n', 'writing the manifest');
    // The report goes in before the commit, so a run that fails here leaves nothing behind.
    if (o.report) writeManifestReport(stage, manifest, basename(out));
    // Into place: never over anything that appeared meanwhile, the manifest last (see output-folder.ts).
    work.commit();
    return { manifest, out, report: o.report ? join(out, REPORT_FILE) : null, warnings };
  } catch (err) {
    // A JSON Lines record with the fold column's key: the reader does not know how the caller
    // names the option; said here.
    if (err instanceof RowdeckError && err.code === 'ERR_OPTION' && err.details.option === 'foldColumn' && err.message.endsWith('otherwise.')) {
      throw new RowdeckError(err.code, `${err.message.slice(0, -1)} (${optionSetting(o.surface, 'foldColumn', 'NAME')}).`, err.details);
    }
    // A fault of the environment met anywhere above: coded, with its path and operation.
    throw codedSystemError(err);
  } finally {
    for (const w of writers) w.abandon();
    if (pool) await pool.destroy().catch(() => {});
    await work.finish();
  }
}

/** Writes a whole file of the output; a failure (a full disk) is a coded error naming it. */
function writeOutputFile(path: string, text: string, doing: string): void {
  try {
    writeFileSync(path, text, { flag: 'wx' });
  } catch (err) {
    throw systemError(err, path, doing);
  }
}

/** Runs `task(i)` for i = 0 .. count - 1, at most `width` at once, started in order of i. */
async function eachAtOnce(count: number, width: number, task: (i: number) => Promise<void>): Promise<void> {
  const limit = pLimit(width);
  await Promise.all(Array.from({ length: count }, (_, i) => limit(() => task(i))));
}

function transpose(a: Float64Array, rows: number, cols: number): Float64Array {
  const out = new Float64Array(a.length);
  for (let r = 0; r < rows; r++) for (let c = 0; c < cols; c++) out[c * rows + r] = a[r * cols + c]!;
  return out;
}

function headerBytes(sc: ScatterResult, o: ResolvedShuffleOptions, format: InputFormat): Buffer | null {
  if (format === 'jsonl' || !sc.schema.headerBytes) return null;
  let h = Buffer.from(sc.schema.headerBytes);
  if (o.foldColumn !== null) {
    const d = String.fromCharCode(sc.schema.delimiter);
    const name = /["\r\n]/.test(o.foldColumn) || o.foldColumn.includes(d) ? `"${o.foldColumn.replaceAll('"', '""')}"` : o.foldColumn;
    h = Buffer.concat([h, Buffer.from(d + name, 'utf8')]);
  }
  return Buffer.concat([h, Buffer.from(sc.schema.lineEnding, 'latin1')]);
}

function describeStratum(key: string, columns: string[], excludeValues: boolean, index: number): string {
  if (excludeValues) return `stratum #${index + 1}`;
  const vals = stratumValues(key);
  if (columns.length === 0) return 'all records';
  return columns.map((c, i) => `${c}=${vals[i] === null ? '(missing)' : JSON.stringify(vals[i])}`).join(', ');
}

function toleranceError(
  o: ResolvedShuffleOptions,
  worst: { deviation: number; unit: number; stratum: number; kind: 'part' | 'fold' },
  strataKeys: string[],
  strataSizes: number[],
  layout: PartInfo[],
  deal: DealSpec,
  records: number,
): RowdeckError {
  const size = strataSizes[worst.stratum]!;
  const what = describeStratum(strataKeys[worst.stratum]!, o.stratify.map((s) => s.name), o.excludeValues, worst.stratum);
  const unit =
    worst.kind === 'part'
      ? `part ${layout[worst.unit]!.path}`
      : `fold ${worst.unit % deal.folds}${deal.splits.length > 1 ? ` of split ${deal.splits[Math.floor(worst.unit / deal.folds)]!.name}` : ''}`;
  const units = worst.kind === 'part' ? layout.length : deal.folds * deal.splits.length;
  const hints: string[] = [];
  if (size < units) hints.push(`fewer ${worst.kind === 'part' ? 'partitions' : 'folds'} (this class has ${size} record${size === 1 ? '' : 's'} for ${units} ${worst.kind}s)`);
  hints.push(`a looser tolerance (${optionSetting(o.surface, 'tolerance', String(Math.ceil(worst.deviation * 100) / 100))} or more)`);
  if (o.stratify.length > 0) hints.push('merging rare classes into one before the shuffle');
  if (o.assign === 'group') hints.push('smaller or more groups');
  return new RowdeckError(
    'ERR_TOLERANCE',
    `Cannot keep class ${what} (${size} of ${records} records) within ${optionSetting(o.surface, 'tolerance', String(o.tolerance))} in every ${worst.kind}: its share in ${unit} deviates by ${(worst.deviation * 100).toFixed(1)}% from its overall share. Nothing was written. What would work: ${hints.join('; ')}.`,
    { stratum: what, count: size, deviation: worst.deviation, tolerance: o.tolerance },
  );
}
