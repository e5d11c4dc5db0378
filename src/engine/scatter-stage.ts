/**
 * The scatter step of a shuffle, as the pipeline and the cluster's scatter tasks run it: quantile
 * bin edges where asked (a first pass), then stage 1 over the inputs (scatter.ts) on worker
 * lanes that stay up for the steps after it. Takes and returns plain data.
 */
import { mkdirSync, statSync } from 'node:fs';
import { stringify } from 'csv-stringify/sync';
import { deriveSecret, type Secret } from '../core/hash.js';
import { RowdeckError } from '../errors.js';
import type { InputFormat, RejectedRecord } from '../io/batch.js';
import { isStreamInput } from '../io/input.js';
import { optionName, optionSetting, type ResolvedShuffleOptions } from '../options.js';
import { WorkerLanes } from '../workers/lanes.js';
import { resolveWorkerFile } from '../workers/worker-file.js';
import type { ShuffleLanes } from '../workers/protocol.js';
import { computeBinEdges, type BinEdges } from './quantiles.js';
import { censusDir, scatter, scatterTaskConfig, type ScatterOptions, type ScatterResult } from './scatter.js';
import { youngGenerationMb, type Layout, type RunSize } from './sizing.js';
import type { MemoryStore } from './ram-store.js';

/** The secrets a seed gives: record keys, hash-mode cells, the dealing's rank permutations. */
export interface Secrets {
  secret: Secret;
  cellSecret: Secret;
  rankSecret: Secret;
}

export function deriveSecrets(seed: string): Secrets {
  return { secret: deriveSecret(seed), cellSecret: deriveSecret(`${seed}\u0000cell`), rankSecret: deriveSecret(`${seed}\u0000rank`) };
}

export type { ShuffleLanes } from '../workers/protocol.js';

/** Records refused under --on-bad-record skip or quarantine: counted per input, and kept as CSV rows for rejected.csv. */
export class Rejects {
  readonly perFile = new Map<string, number>();
  readonly rows: string[] = [];
  readonly #keep: boolean;
  constructor(keep: boolean) {
    this.#keep = keep;
  }
  add(r: RejectedRecord): void {
    this.perFile.set(r.file, (this.perFile.get(r.file) ?? 0) + 1);
    if (this.#keep) this.rows.push(stringify([[r.file, r.line, r.code, r.reason, r.bytes.toString('utf8')]]));
  }
  get count(): number {
    let n = 0;
    for (const v of this.perFile.values()) n += v;
    return n;
  }
  /** The whole of rejected.csv, or null when nothing was kept. */
  file(): string | null {
    return this.rows.length > 0 ? stringify([['file', 'line', 'code', 'reason', 'record']]) + this.rows.join('') : null;
  }
}

export interface ScatterStageInput {
  o: ResolvedShuffleOptions;
  format: InputFormat;
  secrets: Secrets;
  size: RunSize;
  spillDir: string;
  /** When the run started, for progress. */
  t0: number;
  /** The memory layout's stores (see ram-store.ts); absent: spill files. */
  memory?: MemoryStore | null;
  /** Told with progress. */
  layout?: Layout;
  /**
   * A cluster's scatter task: only these slices of the inputs, with the bin edges the plan
   * computed; refused records to `onReject` (with the slice told by `onSliceStart`).
   */
  task?: {
    slices: NonNullable<ScatterOptions['slices']>;
    expectedColumns?: { columns: string[]; from: string };
    binEdges: BinEdges[];
    onReject?: (r: RejectedRecord) => void;
    onSliceStart?: (index: number) => void;
  };
}

export interface ScatterStage {
  sc: ScatterResult;
  binEdges: BinEdges[];
  rejects: Rejects;
  /** Group and hash modes placing records individually (see ScatterTaskConfig.cellKeyInHeader). */
  cellKeyInHeader: boolean;
  /** The worker lanes, still running (null: the calling thread did the work). */
  lanes: ShuffleLanes | null;
}

/** Whether records of one group or key are placed individually inside their part (see ScatterTaskConfig.cellKeyInHeader). */
export function placesRecordsIndividually(o: Pick<ResolvedShuffleOptions, 'assign' | 'order'>): boolean {
  return o.assign !== 'exact' && o.order !== 'grouped';
}

export async function runScatterStage(i: ScatterStageInput): Promise<ScatterStage> {
  const { o, format, secrets, size, spillDir, t0 } = i;
  const rejects = new Rejects(o.onBadRecord === 'quarantine');

  // Quantile bins need their edges before any record can be given a stratum.
  let binEdges: BinEdges[] = i.task?.binEdges ?? [];
  const binCols = o.stratify.filter((c) => c.bins > 0);
  if (binCols.length > 0 && !i.task) {
    binEdges = await computeBinEdges({
      inputs: o.inputs,
      format,
      delimiter: o.delimiter ?? undefined,
      header: o.header,
      onBadRecord: o.onBadRecord,
      columns: binCols,
      secret: secrets.secret,
    });
  }

  const cellKeyInHeader = placesRecordsIndividually(o);
  if (cellKeyInHeader && o.assign === 'group') mkdirSync(censusDir(spillDir));
  // Unknown (0: no bar) when any input is a stream: its size is not known before it ends. A
  // cluster's task reads only its slices' inputs.
  const read = i.task ? [...new Set(i.task.slices.map((s) => o.inputs[s.slice.input]!))] : o.inputs;
  const totalBytes = read.some(isStreamInput) ? 0 : read.reduce((a, p) => a + statSync(p).size, 0);
  const scatterOptions: ScatterOptions = {
    inputs: o.inputs,
    format,
    delimiter: o.delimiter ?? undefined,
    header: o.header,
    onBadRecord: o.onBadRecord,
    onReject: o.onBadRecord === 'fail' ? undefined : (i.task?.onReject ?? ((r) => rejects.add(r))),
    stratify: o.stratify.map((s) => s.name),
    bins: o.stratify.map((s) => binEdges.find((b) => b.column === s.name && s.bins > 0)?.edges ?? null),
    key: o.key,
    group: o.group,
    secret: secrets.secret,
    spillDir,
    threads: size.threads,
    onSchema: (schema) => {
      if (o.foldColumn !== null && schema.columns.includes(o.foldColumn)) {
        throw new RowdeckError(
          'RDK_OPTION',
          `Invalid option ${optionName(o.surface, 'foldColumn')}: the input already has a column named "${o.foldColumn}". Name the added column otherwise (${optionSetting(o.surface, 'foldColumn', 'NAME')}).`,
          { option: 'foldColumn', column: o.foldColumn },
        );
      }
    },
    ...(format === 'jsonl' && o.foldColumn !== null ? { refuseKey: o.foldColumn } : {}),
    bits: size.bits,
    bufferBytes: size.bufferBytes,
    blockBytes: size.blockBytes,
    // Hash mode: cells follow from keys alone, so stage 1 can count them on the way.
    hashCells: o.assign === 'hash' ? { deal: { splits: o.splits, exactCounts: false, partitions: o.partitions, folds: o.folds }, cellSecret: Array.from(secrets.cellSecret) } : null,
    // The census buckets hold a quarter as many records as the spill's, 24 bytes each.
    cellKeyInHeader: cellKeyInHeader ? { censusBits: o.assign === 'group' ? Math.max(0, size.bits - 2) : null, censusBufferBytes: size.bufferBytes } : null,
    onProgress: (done, records) => o.onProgress?.({ stage: 'scatter', done, total: totalBytes, records, elapsedMs: Date.now() - t0, ...(i.layout ? { layout: i.layout } : {}) }),
    store: i.memory?.store ?? null,
    censusStore: i.memory?.censusStore ?? null,
    ...(i.memory ? { onRelease: i.memory.onRelease } : {}),
    ...(i.task ? { slices: i.task.slices, ...(i.task.expectedColumns ? { expectedColumns: i.task.expectedColumns } : {}), ...(i.task.onSliceStart ? { onSliceStart: i.task.onSliceStart } : {}) } : {}),
  };
  // The same threads do every step (shuffle-worker.ts): started here, kept for the next ones.
  let lanes: ShuffleLanes | null = null;
  if (size.threads > 0) {
    const young = youngGenerationMb(size.memory);
    lanes = new WorkerLanes(resolveWorkerFile(), size.threads, scatterTaskConfig(scatterOptions), young === undefined ? undefined : { maxYoungGenerationSizeMb: young });
    scatterOptions.lanes = lanes;
  }
  try {
    const sc = await scatter(scatterOptions);
    return { sc, binEdges, rejects, cellKeyInHeader, lanes };
  } catch (err) {
    await lanes?.destroy().catch(() => {});
    throw err;
  }
}
