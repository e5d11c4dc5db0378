/**
 * What the calling thread and the worker lanes say to each other. Every message a lane is given
 * names its `kind`; a worker entry answers through a table of handlers keyed by it (`byKind`),
 * and the reply to a message is `Replies[kind]`, so a caller's `lanes.run(message)` is typed by
 * what it sent, whatever else the same threads take.
 *
 *   kind                  sent by                                  reply
 *   batch                 BatchSender (scatter.ts), profile         Released: the buffer, for reuse
 *   small                 SmallInputSender (io/small-inputs.ts)     SmallInputReply
 *   block, recheck        readInBlocks (io/blocks.ts)               BlockSummary
 *   commit, drop          readInBlocks                              Released
 *   columns               profile (an input's column map)           Released (no buffer)
 *   census                countGroups (group-census.ts)             GroupTableData
 *   split                 unitsOf (split.ts)                        SplitResult
 *   bucket                runGatherStage (gather-stage.ts)          GatherResult
 *   partStats             partStatistics (parts.ts)                 PartStatsResult
 *   join                  finish (cluster/finish.ts)                Joined (join-worker.ts answers)
 *   part                  verify's part scan (verify/scan-parts.ts) SerializedPartScan
 *
 * A lane's `finish` gets what the worker kept; the shuffle's threads finish twice, and say which
 * stage they finished (`ShuffleFinal`). The envelope that carries these (ids, errors) is lanes.ts's.
 */
import type { TransferListItem } from 'node:worker_threads';
import { RowdeckError } from '../errors.js';
import type { GroupTableData } from '../core/group-table.js';
import type { InputSchema, RejectedRecord } from '../io/batch.js';
import type { RecordReaderOptions } from '../io/reader.js';
import type { JoinTask, Joined } from '../io/join-files.js';
import type { CensusTask } from '../engine/census-bucket.js';
import type { GatherResult, GatherTask } from '../engine/gather.js';
import type { GatherFinal } from '../engine/gather-lane.js';
import type { PartStatsResult, PartStatsTask } from '../engine/part-stats.js';
import type { ScatterTaskResult } from '../engine/scatter.js';
import type { SplitResult, SplitTask } from '../engine/split.js';
import type { SerializedPartScan, VerifyPartTask } from '../engine/verify/scan-parts.js';
import type { Lanes, WorkerLanes } from './lanes.js';

// --- messages to a lane ----------------------------------------------------------------------

/** A batch read on the calling thread, packed into one buffer (packBatch in scatter.ts). */
export interface BatchMessage {
  kind: 'batch';
  buffer: ArrayBuffer;
}

/** The reader options of an input, as they cross to a worker (refused records come back in replies). */
export type BlockReaderOptions = Omit<RecordReaderOptions, 'onReject'>;

/** A block of a plain input for a worker to parse (see io/blocks.ts). */
export interface BlockJob {
  kind: 'block';
  id: number;
  input: number;
  reader: BlockReaderOptions;
  schema: InputSchema;
  buffer: ArrayBuffer;
  length: number;
  /** Input offset of `buffer[0]`. */
  origin: number;
  /** Index in the buffer where the block begins. */
  from: number;
  /** Index where the next block begins; -1: this block runs to the input's end (the buffer's end). */
  stop: number;
  /** `from` is a known record start; otherwise a start is guessed after the first line end at or after `from - 1`. */
  exact: boolean;
}

/** Parse a held block again from a known record start. */
export interface RecheckMessage {
  kind: 'recheck';
  id: number;
  start: number;
}

/** A held block's records are right: hand them on, their line numbers counted from `lineBase`. */
export interface CommitMessage {
  kind: 'commit';
  id: number;
  lineBase: number;
}

/** Forget a held block (the input is read on the calling thread from before it). */
export interface DropMessage {
  kind: 'drop';
  id: number;
}

export type BlockMessage = BlockJob | RecheckMessage | CommitMessage | DropMessage;

/**
 * A small input for a worker to read and parse (see SmallInputSender): its path, the size it had
 * when looked at, and the reader's options, without callbacks.
 */
export interface SmallInputMessage {
  kind: 'small';
  input: number;
  path: string;
  size: number;
  reader: BlockReaderOptions;
}

/** Profile, column-sharing lanes: which of input `input`'s columns are the first input's (null: the same). */
export interface ColumnsMessage {
  kind: 'columns';
  input: number;
  map: number[] | null;
}

/** Group mode, before the plan: count one census bucket's groups (census-bucket.ts). */
export type CensusMessage = { kind: 'census' } & CensusTask;

/** Scatter one share of a bucket too large to deal whole into sub-buckets (split.ts). */
export type SplitMessage = { kind: 'split' } & SplitTask;

/** Deal one bucket (gather.ts); the plan is read with the first. */
export type BucketMessage = { kind: 'bucket' } & GatherTask;

/** Read a written part back for its statistics (part-stats.ts). */
export type PartStatsMessage = { kind: 'partStats' } & PartStatsTask;

/** Write one plain part from a plan's gather tasks' files, hashing it (io/join-files.ts). */
export type JoinMessage = { kind: 'join' } & JoinTask;

// --- replies ---------------------------------------------------------------------------------

/** A buffer handed back for reuse (a packed batch's, a block's), or (id -1, empty) a plain acknowledgement. */
export interface Released {
  kind: 'released';
  id: number;
  buffer: ArrayBuffer;
}

export interface BlockSummary {
  kind: 'summary';
  id: number;
  /** The block parsed cleanly from `start` and its last record ends before `end`. */
  ok: boolean;
  /** Input offset the block was read from (-1: no line start was found). */
  start: number;
  /** Input offset of the first record start at or after the next block's start. */
  end: number;
  /** Line ends from `start` to `end` (so the next block starts `lines` lines further on). */
  lines: number;
  records: number;
  /** Records refused in the block (skip, quarantine), with line numbers counted from the block's start. */
  rejects: RejectedRecord[];
}

export type BlockReply = BlockSummary | Released;

/** A worker's answer to a SmallInputMessage: what the reader counted, or that it left the input to the calling thread. */
export type SmallInputReply = { kind: 'parsed'; id: -1; records: number; bytes: number } | { kind: 'declined'; id: -1 };

/** The reply to each kind of message. */
export interface Replies {
  batch: Released;
  small: SmallInputReply;
  block: BlockSummary;
  recheck: BlockSummary;
  commit: Released;
  drop: Released;
  columns: Released;
  census: GroupTableData;
  split: SplitResult;
  bucket: GatherResult;
  partStats: PartStatsResult;
  join: Joined;
  part: SerializedPartScan;
}

export type Kind = keyof Replies;

/** The reply to message `M`, by its kind. */
export type Reply<M> = M extends { kind: infer K extends Kind } ? Replies[K] : never;

/** A handler's answer: the reply, and the buffers that go with it without a copy. */
export interface Answer<X> {
  result: X;
  transfer?: TransferListItem[];
}

/** One handler per kind of message `T`, each answering with that kind's reply (at once or later). */
export type HandlerTable<T extends { kind: Kind }> = {
  [K in T['kind']]: (m: Extract<T, { kind: K }>) => Answer<Replies[K]> | Promise<Answer<Replies[K]>>;
};

/** The handler that answers each message with the table's entry for its kind. */
export function byKind<T extends { kind: Kind }>(table: HandlerTable<T>): (m: T) => Answer<Reply<T>> | Promise<Answer<Reply<T>>> {
  // The table's type ties each entry to its kind; looked up by a kind known only when a message comes, an entry takes any message of T.
  const handlers = new Map<string, (m: T) => Answer<Reply<T>> | Promise<Answer<Reply<T>>>>(Object.entries(table));
  return (m) => {
    const handle = handlers.get(m.kind);
    if (!handle) throw new RowdeckError('RDK_INTERNAL', `a worker was sent a message of kind ${m.kind}, which it does not take`);
    return handle(m);
  };
}

// --- what each worker entry takes -------------------------------------------------------------

/** The scatter work of stage 1: a packed batch read by the calling thread, a small input to read, or block work. */
export type ScatterMessage = BatchMessage | SmallInputMessage | BlockMessage;

/** The same threads' work after stage 1: count a bucket's groups, split a bucket, deal a bucket, read a part back. */
export type GatherMessage = CensusMessage | SplitMessage | BucketMessage | PartStatsMessage;

/** Everything shuffle-worker.ts takes. */
export type ShuffleMessage = ScatterMessage | GatherMessage;

/** Everything verify-worker.ts takes: one part to read. */
export type VerifyMessage = VerifyPartTask;

/** Everything profile-worker.ts takes. */
export type ProfileMessage = ColumnsMessage | BatchMessage | SmallInputMessage | BlockMessage;

/** Lanes that take the work after stage 1 (the shuffle's threads, or the calling thread's lane: gather-lane.ts). */
export type GatherLanes = Lanes<GatherMessage, ShuffleFinal>;

/** Lanes that count groups (group-census.ts): census buckets, and the splits of those too large to take whole. */
export type CensusLanes = Pick<Lanes<CensusMessage | SplitMessage, unknown>, 'run'>;

/** The shuffle's threads (shuffle-worker.ts): they scatter, count groups, then deal the buckets. */
export type ShuffleLanes = WorkerLanes<ShuffleMessage, ShuffleFinal>;

/** What a shuffle lane hands over when it finishes a stage: its scatter task's result, then what stage 2 kept. */
export type ShuffleFinal = { kind: 'scattered'; result: ScatterTaskResult } | { kind: 'gathered'; final: GatherFinal };

/** The scatter tasks' results, from the lanes' first finish (see shuffle-worker.ts). */
export function scatterFinals(finals: ShuffleFinal[]): ScatterTaskResult[] {
  return finals.map((f) => {
    if (f.kind !== 'scattered') throw new RowdeckError('RDK_INTERNAL', `a lane finished ${f.kind} where stage 1 was to finish`);
    return f.result;
  });
}

/** What stage 2 kept on each lane, from the lanes' second finish. */
export function gatherFinals(finals: ShuffleFinal[]): GatherFinal[] {
  return finals.map((f) => {
    if (f.kind !== 'gathered') throw new RowdeckError('RDK_INTERNAL', `a lane finished ${f.kind} where stage 2 was to finish`);
    return f.final;
  });
}
