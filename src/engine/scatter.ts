/**
 * Stage 1, scatter: give every record its key and append it to the spill bucket of its key
 * range; count records per (bucket, stratum) for the plan and collect what group mode needs.
 *
 *   plain file:  main thread reads blocks ──▶ scatter worker parses its block (io/blocks.ts),
 *                checked in order ──▶ commit ──▶ ScatterTask: key, stratum, BucketWriter
 *   stdin, gzip: main thread: RecordReader ──▶ packBatch ──▶ scatter worker k (≤ 2 in flight each)
 *                                                             ScatterTask, as above
 *                ◀── buffers back for reuse
 *   finish ──▶ each worker closes its spill files, returns counts/strata/fingerprint
 *
 * The per-record work (scatter-task.ts) runs on the workers, and for plain files the parsing
 * too. Each worker is one scatter task with its own spill files and its own local stratum ids;
 * the plan maps them to one dealing order. Which worker saw which record changes nothing
 * downstream: stage 2 sorts every bucket by key and identity.
 */
import type { BadRecordPolicy, InputFormat, InputSchema, RecordBatch, RejectedRecord } from '../io/batch.js';
import { Fingerprint, type Secret } from '../core/hash.js';
import { BatchSender } from '../io/packed-batches.js';
import type { RecordReaderOptions } from '../io/reader.js';
import { inputReaderOptions, readInput, ReadAhead } from '../io/input.js';
import { readInputs, smallFileSize, SmallInputSender } from '../io/small-inputs.js';
import { readOneInput } from '../io/drive.js';
import { readSlice, type InputSlice, type SliceRead } from '../io/slices.js';
import { blockSizes } from '../io/blocks.js';
import { RowdeckError } from '../errors.js';
import { WorkerLanes } from '../workers/lanes.js';
import { scatterFinals, type ScatterMessage, type ShuffleFinal } from '../workers/protocol.js';
import type { SpillStore } from './spill.js';
import { ScatterTask, type ScatterTaskConfig, type ScatterTaskResult } from './scatter-task.js';
import { SpillIndex } from './spill-index.js';

export { addSmallInput, censusDir, ScatterTask, type ScatterTaskConfig, type ScatterTaskResult } from './scatter-task.js';

export interface ScatterOptions extends Omit<ScatterTaskConfig, 'task' | 'secret' | 'bins' | 'hashCells' | 'cellKeyInHeader' | 'store' | 'censusStore'> {
  hashCells?: ScatterTaskConfig['hashCells'];
  cellKeyInHeader?: ScatterTaskConfig['cellKeyInHeader'];
  store?: SpillStore | null;
  censusStore?: SpillStore | null;
  /** Called with each range of the spill (and of the census spill) that stage 2 has passed: its files in memory can be closed. */
  onRelease?: { spill: (range: number) => void; census: (range: number) => void };
  format: InputFormat;
  delimiter: string | undefined;
  header: boolean;
  onBadRecord: BadRecordPolicy;
  onReject: ((r: RejectedRecord) => void) | undefined;
  bins?: (number[] | null)[];
  secret: Secret;
  /** Scatter worker threads; 0 runs the tasks' work on the calling thread. */
  threads: number;
  /** Path of the compiled scatter worker module (needed when threads > 0 and `lanes` is not given). */
  workerFile?: string;
  /**
   * Lanes to run the tasks on, started by the caller with `scatterTaskConfig(o)` as their data
   * and kept by it (the shuffle hands the same threads stage 2's buckets afterwards).
   */
  lanes?: ScatterLanes;
  /** Called once with the first input's schema, before any record is scattered; may throw. */
  onSchema?: (schema: InputSchema) => void;
  /** JSON Lines: a key no record may have (the fold column the output adds; see RecordReaderOptions). */
  refuseKey?: string;
  onProgress?: (bytes: number, records: number) => void;
  /** Size of the blocks the workers parse (plain files); default DEFAULT_BLOCK_BYTES. */
  blockBytes?: number;
  /**
   * Read only these slices of the inputs (a cluster's scatter task), in order, instead of every
   * input whole; `inputs` stays the whole list, so records keep their input ordinals. Each read's
   * start, end and line count come back in `ScatterResult.slices`.
   */
  slices?: { slice: InputSlice; schema: InputSchema | null }[];
  /** With slices: the first input's columns, that every other input's header must match. */
  expectedColumns?: { columns: string[]; from: string };
  /** With slices: told before each slice is read (its index), so refused records can be told apart by slice. */
  onSliceStart?: (index: number) => void;
}

export interface ScatterResult {
  schema: InputSchema;
  /** Union stratum id -> canonical stratum key. */
  strata: string[];
  /** `bucketCounts[stratum][bucket]` over all tasks. */
  bucketCounts: Uint32Array[];
  /** Per task: local stratum id -> union stratum id. */
  taskStrata: number[][];
  /** Where every bucket's records lie: chunks of every task's spill files or slabs. */
  spill: SpillIndex;
  inputs: { path: string; bytes: number; records: number; rejected: number }[];
  records: number;
  rejected: number;
  fingerprint: Fingerprint;
  /** Hash mode: `cellCounts[stratum][cell]` over all tasks (union stratum ids). */
  cellCounts: Float64Array[] | null;
  /** Where every census bucket's records lie (see ScatterTaskConfig.cellKeyInHeader); null without a census spill. */
  census: SpillIndex | null;
  /** With ScatterOptions.slices: how each slice was read, and every scatter task's own result (for another process to merge). */
  slices?: SliceRead[];
  results?: ScatterTaskResult[];
}

export { packBatch, unpackBatch } from '../io/packed-batches.js';

// --- orchestration -----------------------------------------------------------------------------------

export type { ScatterMessage } from '../workers/protocol.js';

/**
 * Lanes that run scatter tasks (shuffle-worker.ts): one worker each, or the caller's (see
 * `ScatterOptions.lanes`), which take stage 2's work afterwards.
 */
export type ScatterLanes = Pick<WorkerLanes<ScatterMessage, ShuffleFinal>, 'size' | 'run' | 'runOn' | 'finish' | 'destroy'>;

/** What every scatter task is told (its lane number aside): the worker data of the scatter lanes. */
export function scatterTaskConfig(o: ScatterOptions): Omit<ScatterTaskConfig, 'task'> {
  const tasks = Math.max(1, o.threads);
  return {
    inputs: o.inputs,
    stratify: o.stratify,
    bins: o.bins ?? o.stratify.map(() => null),
    key: o.key,
    group: o.group,
    secret: Array.from(o.secret),
    spillDir: o.spillDir,
    bits: o.bits,
    bufferBytes: Math.max(4096, Math.floor(o.bufferBytes / tasks)),
    hashCells: o.hashCells ?? null,
    cellKeyInHeader: o.cellKeyInHeader ? { ...o.cellKeyInHeader, censusBufferBytes: Math.max(4096, Math.floor(o.cellKeyInHeader.censusBufferBytes / tasks)) } : null,
    store: o.store ?? null,
    censusStore: o.censusStore ?? null,
  };
}

/**
 * Worker data for lanes that will not scatter (a plan's deal, gather and finish steps start the
 * same worker entry): no inputs, one bucket of a small buffer, `spillDir` where plan.json is.
 */
export function idleScatterConfig(spillDir: string): Omit<ScatterTaskConfig, 'task'> {
  return { inputs: [], stratify: [], bins: [], key: [], group: null, secret: [0, 0, 0, 0], spillDir, bits: 0, bufferBytes: 4096, hashCells: null, cellKeyInHeader: null, store: null, censusStore: null };
}

export async function scatter(o: ScatterOptions): Promise<ScatterResult> {
  const wanted = [...o.stratify, ...o.key, ...(o.group !== null ? [o.group] : [])];
  const tasks = Math.max(1, o.threads);
  const config = scatterTaskConfig(o);
  const inputs = o.inputs.map((path) => ({ path, bytes: 0, records: 0, rejected: 0 }));
  let schema: InputSchema | null = null;
  const takeSchema = (sch: InputSchema): void => {
    if (schema) return;
    schema = sch;
    o.onSchema?.(sch);
  };

  const inline = o.threads === 0 ? new ScatterTask({ ...config, task: 0 }) : null;
  if (!inline && !o.workerFile && !o.lanes) throw new RowdeckError('RDK_INTERNAL', 'scatter: no worker module given');
  const ownLanes = !inline && !o.lanes;
  const lanes: ScatterLanes | null = inline ? null : (o.lanes ?? new WorkerLanes<ScatterMessage, ShuffleFinal>(o.workerFile!, tasks, config));
  const sender = lanes ? new BatchSender(lanes) : null;
  const small = lanes && o.onBadRecord === 'fail' && o.inputs.length > 1 ? new SmallInputSender(lanes) : null;
  const send = async (batch: RecordBatch, input: number, sch: InputSchema): Promise<void> => {
    takeSchema(sch);
    if (inline) inline.addBatch(batch, input);
    else await sender!.send(batch, input);
  };
  // Progress counts the bytes taken from each source (compressed ones for gzip), which is what
  // the file sizes it is measured against hold; the manifest counts them decompressed.
  const taken = o.inputs.map(() => 0);
  const progress = (): void => o.onProgress?.(taken.reduce((a, b) => a + b, 0), inputs.reduce((a, x) => a + x.records, 0));
  try {
    let expected: { columns: string[]; from: string } | undefined;
    // With small inputs given to the workers, nothing is read ahead here (see SmallInputSender).
    const ahead = new ReadAhead(o.inputs, blockSizes({ ...(o.blockBytes !== undefined ? { blockBytes: o.blockBytes } : {}) }).block, small ? 0 : undefined);
    const readerOptions = (k: number): RecordReaderOptions =>
      inputReaderOptions(o.inputs[k]!, { format: o.format, ...(o.delimiter !== undefined ? { delimiter: o.delimiter } : {}), ...(o.refuseKey !== undefined ? { refuseKey: o.refuseKey } : {}), header: o.header, wanted, onBadRecord: o.onBadRecord, onReject: o.onReject }, expected);
    /** Reads input k here: whole if it was read ahead, else in blocks by the workers, else as a stream (io/drive.ts). */
    const readHere = async (k: number): Promise<void> => {
      const ro = readerOptions(k);
      await readOneInput({
        path: o.inputs[k]!,
        input: k,
        reader: ro,
        whole: await ahead.take(k),
        lanes,
        ...(o.blockBytes !== undefined ? { blockBytes: o.blockBytes } : {}),
        send: (batch, sch) => send(batch, k, sch),
        onSchema: takeSchema,
        counts: inputs[k]!,
        onProgress: (bytes) => {
          taken[k] = bytes;
          progress();
        },
      });
      if (k === 0 && ro.format !== 'jsonl' && schema) expected = { columns: (schema as InputSchema).columns, from: ro.file };
    };
    if (o.slices) {
      expected = o.expectedColumns;
      const reads: SliceRead[] = [];
      for (const [j, { slice, schema: known }] of o.slices.entries()) {
        const k = slice.input;
        const read: SliceRead = { start: 0, end: 0, lines: 0, records: 0, bytes: 0, rejected: 0 };
        o.onSliceStart?.(j);
        try {
          if (slice.start === 0 && slice.end < 0) {
            // A whole input (gzip too): read as always; its line count matters to no slice after it.
            for await (const { batch, schema: sch, stats } of readInput(o.inputs[k]!, readerOptions(k))) {
              await send(batch, k, sch);
              read.records += batch.count;
              read.bytes = stats.bytes;
              read.rejected = stats.rejected;
            }
            read.end = read.bytes;
          } else {
            for await (const { batch, schema: sch } of readSlice(o.inputs[k]!, slice, readerOptions(k), known, read)) await send(batch, k, sch);
          }
        } catch (err) {
          // Which slice stopped: its line numbers count from its own start.
          if (err instanceof RowdeckError) err.details.slice = j;
          throw err;
        }
        const seen = inputs[k]!;
        seen.records += read.records;
        seen.bytes += read.bytes;
        seen.rejected += read.rejected;
        reads.push(read);
        progress();
      }
      if (!schema) throw new RowdeckError('RDK_INPUT_EMPTY', `${o.inputs.join(', ')}: no records in this task's slices.`, { file: o.inputs[o.slices[0]?.slice.input ?? 0] });
      let results: ScatterTaskResult[];
      if (inline) results = [inline.finish()];
      else {
        await sender!.drain();
        results = scatterFinals(await lanes!.finish());
      }
      const censusBits = o.cellKeyInHeader?.censusBits ?? null;
      // The merge adds into the first task's count arrays: the results handed back keep their own.
      const copies = results.map((r) => ({ ...r, bucketCounts: r.bucketCounts.map((a) => a.slice()) }));
      return { ...mergeScatterResults(copies, schema, inputs, 2 ** o.bits, censusBits === null ? 0 : 2 ** censusBits), slices: reads, results };
    }
    await readInputs(
      o.inputs.length,
      () => small,
      (k) => {
        const size = schema ? smallFileSize(o.inputs[k]!) : null;
        if (size === null) return null;
        const seen = inputs[k]!;
        return {
          path: o.inputs[k]!,
          size,
          reader: readerOptions(k),
          done: (records, bytes) => {
            seen.records = records;
            seen.bytes = taken[k] = bytes;
            progress();
          },
        };
      },
      readHere,
    );
    progress();
    if (!schema) throw new RowdeckError('RDK_INPUT_EMPTY', `${o.inputs.join(', ')}: no records to shuffle.`, { file: o.inputs[0] });
    let results: ScatterTaskResult[];
    if (inline) results = [inline.finish()];
    else {
      await sender!.drain();
      results = scatterFinals(await lanes!.finish());
    }
    const censusBits = o.cellKeyInHeader?.censusBits ?? null;
    return mergeScatterResults(results, schema, inputs, 2 ** o.bits, censusBits === null ? 0 : 2 ** censusBits, o.onRelease);
  } catch (err) {
    inline?.abandon();
    throw err;
  } finally {
    if (ownLanes) await lanes?.destroy();
  }
}

/** Combines the tasks' results: union of strata (in task order), summed counts. */
export function mergeScatterResults(
  results: ScatterTaskResult[],
  schema: InputSchema,
  inputs: ScatterResult['inputs'],
  buckets: number,
  censusBuckets = 0,
  onRelease?: ScatterOptions['onRelease'],
): ScatterResult {
  results.sort((a, b) => a.task - b.task);
  const ids = new Map<string, number>();
  const strata: string[] = [];
  // A stratum's counts are added into the first task's array that has it (with thousands of
  // strata, these tables are the largest thing stage 1 hands over).
  const bucketCounts: Uint32Array[] = [];
  const taskStrata = results.map((r) =>
    r.strata.map((k, local) => {
      const src = r.bucketCounts[local]!;
      let id = ids.get(k);
      if (id === undefined) {
        id = strata.length;
        ids.set(k, id);
        strata.push(k);
        bucketCounts.push(src.length === buckets ? src : new Uint32Array(buckets));
        if (src.length === buckets) return id;
      }
      const dst = bucketCounts[id]!;
      for (let b = 0; b < buckets; b++) dst[b]! += src[b]!;
      return id;
    }),
  );
  const fp = new Fingerprint();
  for (const r of results) fp.merge(r.fingerprint);
  let cellCounts: Float64Array[] | null = null;
  if (results.some((r) => r.cellCounts)) {
    cellCounts = strata.map(() => new Float64Array(0));
    results.forEach((r, t) =>
      r.cellCounts?.forEach((src, local) => {
        const u = taskStrata[t]![local]!;
        const dst = cellCounts![u]!.length ? cellCounts![u]! : (cellCounts![u] = new Float64Array(src.length));
        for (let k = 0; k < src.length; k++) dst[k]! += src[k]!;
      }),
    );
  }
  const spill = new SpillIndex(results, buckets, undefined, onRelease?.spill ?? null);
  const census = censusBuckets > 0 ? new SpillIndex(results.map((r) => r.census!), censusBuckets, undefined, onRelease?.census ?? null) : null;
  return {
    schema,
    strata,
    bucketCounts,
    taskStrata,
    spill,
    inputs,
    records: results.reduce((a, r) => a + r.records, 0),
    rejected: inputs.reduce((a, x) => a + x.rejected, 0),
    fingerprint: fp,
    cellCounts,
    census,
  };
}
