/**
 * `profile`'s one read of the inputs, counted as it goes:
 *
 *   main thread: open input ─▶ learn its columns ─▶ plain file: blocks parsed by the profile
 *                workers (io/blocks.ts, every column wanted); stdin, gzip: RecordReader here
 *                ─▶ packBatch ─▶ profile worker k (≤ 2 batches in flight each) ─▶ buffer back
 *   finish ─▶ each worker returns its serialised TableStats and stratum counts
 *
 * Inputs of COLUMN_SHARE_MIN columns or more are shared out by column instead: every batch is
 * read here and goes to every worker, each keeps the statistics of its own run of columns, and
 * their tables are put side by side at the end (joinColumnShares), not merged.
 */
import type { RecordBatch, RejectedRecord } from '../../io/batch.js';
import { blockSizes } from '../../io/blocks.js';
import { readOneInput } from '../../io/drive.js';
import { unknownColumn } from '../../io/fields.js';
import { detectFormat, nameInput, openInput, ReadAhead } from '../../io/input.js';
import { BatchSender } from '../../io/packed-batches.js';
import { RecordReader, type RecordReaderOptions } from '../../io/reader.js';
import { readInputs, smallFileSize, SmallInputSender } from '../../io/small-inputs.js';
import type { ResolvedProfileOptions } from '../../options.js';
import { WorkerLanes } from '../../workers/lanes.js';
import { resolveWorkerFile } from '../../workers/worker-file.js';
import type { BinEdges } from '../quantiles.js';
import type { Profile, ProfileInput } from './result.js';
import { COLUMN_SHARE_MIN, joinColumnShares, ProfileTask, type ProfileMessage, type ProfileTaskConfig, type ProfileTaskResult } from './task.js';

/** Blocks the workers parse (see readInBlocks). */
const PROFILE_BLOCK_BYTES = 1 << 20;
/** What the probe parses at a time while it looks for an input's columns. */
const PROBE_SLICE = 64 << 10;

/** Rejected records listed in a profile (all are counted). */
const MAX_LISTED_REJECTS = 20;

async function* once(b: Buffer): AsyncGenerator<Buffer> {
  yield b;
}

/** What the read gives: the columns (the first input's), each thread's counts, each input's totals, the first rejected records. */
export interface ReadCounts {
  columns: string[];
  results: ProfileTaskResult[];
  inputs: ProfileInput[];
  rejects: Profile['rejects'];
}

type ProfileLanes = WorkerLanes<ProfileMessage, ProfileTaskResult>;

/**
 * Reads every input once and counts it (see ProfileTask), on worker threads or (threads 0) on
 * this one. `totalBytes`: the inputs' sizes for progress (0: unknown); `startedAt`: when the
 * read began, for progress.
 */
export async function readAndCount(o: ResolvedProfileOptions, binEdges: BinEdges[], totalBytes: number, startedAt: number): Promise<ReadCounts> {
  const files = o.inputs.map(nameInput);
  const inputs: ProfileInput[] = o.inputs.map((path) => ({ path, format: detectFormat(path, o.format ?? undefined), bytes: 0, records: 0, rejected: 0 }));
  const rejects: Profile['rejects'] = [];
  const onReject = (r: RejectedRecord): void => {
    if (rejects.length < MAX_LISTED_REJECTS) rejects.push({ file: r.file, line: r.line, code: r.code, reason: o.excludeValues ? null : r.reason });
  };
  // Progress counts the bytes taken from each source (compressed ones for gzip), as the file
  // sizes in totalBytes do; the profile counts them decompressed.
  const taken = o.inputs.map(() => 0);
  const progress = (): void =>
    o.onProgress?.({ stage: 'read', done: taken.reduce((a, b) => a + b, 0), total: totalBytes, records: inputs.reduce((a, x) => a + x.records, 0), elapsedMs: Date.now() - startedAt });

  // Started once the first input's columns are known (they size the statistics).
  const run: { inline: ProfileTask | null; lanes: ProfileLanes | null; sender: BatchSender | null; columnShares: boolean; small: SmallInputSender | null } = {
    inline: null,
    lanes: null,
    sender: null,
    columnShares: false,
    small: null,
  };
  const start = (cols: string[]): void => {
    const stratify = o.stratify.map((s) => {
      const column = cols.indexOf(s.name);
      if (column < 0) throw unknownColumn(s.name, cols, files[0]!);
      return { column, name: s.name, edges: s.bins > 0 ? (binEdges.find((b) => b.column === s.name)?.edges ?? []) : null };
    });
    const columnShares = o.threads >= 2 && cols.length >= COLUMN_SHARE_MIN ? o.threads : 0;
    const config: ProfileTaskConfig = { columns: cols, files, stratify, columnShares };
    if (o.threads === 0) run.inline = new ProfileTask(config);
    else {
      run.lanes = new WorkerLanes(resolveWorkerFile('profile-worker.js'), o.threads, config);
      run.sender = new BatchSender(run.lanes, columnShares > 0);
      run.columnShares = columnShares > 0;
      // Small CSV/TSV inputs after the first are read and parsed by the workers (every column
      // wanted, as here), unless each worker needs every record (column shares).
      if (columnShares === 0 && o.onBadRecord === 'fail' && o.inputs.length > 1) run.small = new SmallInputSender(run.lanes);
    }
  };

  const send = async (batch: RecordBatch, input: number): Promise<void> => {
    if (run.inline) run.inline.addBatch(batch, input);
    else await run.sender!.send(batch, input);
  };

  try {
    let first = null as { columns: string[]; csv: boolean } | null;
    const blockBytes = blockSizes({ blockBytes: PROFILE_BLOCK_BYTES }).block;
    // The first input alone, then (its columns known) the rest: nothing is read ahead for inputs
    // the workers read themselves (see SmallInputSender).
    let ahead = new ReadAhead(o.inputs, blockBytes, 0);
    /** Reads input k here (whole if it was read ahead), or in blocks by the workers. */
    const readHere = async (k: number): Promise<void> => {
      const path = o.inputs[k]!;
      const seen = inputs[k]!;
      // Small files were read ahead, whole (see ReadAhead).
      const whole = await ahead.take(k);
      const source = { bytes: whole ? whole.length : 0 };
      const it = (whole ? once(whole) : openInput(path, source))[Symbol.asyncIterator]();
      let probed: Awaited<ReturnType<typeof probeInput>>;
      try {
        probed = await probeInput(o, k, first, onReject, it);
      } catch (err) {
        await it.return?.(undefined);
        throw err;
      }
      const { plan, columns, held, ended } = probed;
      if (first === null) {
        first = { columns, csv: plan.reader.format !== 'jsonl' };
        start(columns);
      }
      run.inline?.setInputColumns(k, plan.map);
      const lanes = run.lanes;
      // Every worker learns the input's columns before any of its records (each lane is in order).
      if (lanes) for (let lane = 0; lane < lanes.size; lane++) void lanes.runOn(lane, { kind: 'columns', input: k, map: plan.map }).catch(() => {});
      // Plain files are parsed by the workers in blocks; stdin and gzip are read here, and so is
      // every input when the workers share out columns (each of them takes every record).
      await readOneInput({
        path,
        input: k,
        reader: plan.reader,
        whole,
        lanes: run.columnShares ? null : lanes,
        // Every column is located, so a held block's arrays are ~5 times those of a shuffle's:
        // smaller blocks keep the memory near what the sequential read used.
        blockBytes: PROFILE_BLOCK_BYTES,
        send: (batch) => send(batch, k),
        counts: seen,
        onProgress: (bytes) => {
          taken[k] = bytes;
          progress();
        },
        opened: { held, rest: ended ? null : it, source },
      });
    };
    await readInputs(
      o.inputs.length,
      () => run.small,
      (k) => {
        // Small CSV/TSV inputs after the first (whose columns they are checked against).
        const size = first?.csv && detectFormat(o.inputs[k]!, o.format ?? undefined) !== 'jsonl' ? smallFileSize(o.inputs[k]!) : null;
        if (size === null) return null;
        const seen = inputs[k]!;
        return {
          path: o.inputs[k]!,
          size,
          reader: readerOptions(o, k, first!.columns, first!.columns, onReject),
          done: (records, bytes) => {
            seen.records = records;
            seen.bytes = taken[k] = bytes;
            progress();
          },
        };
      },
      async (k) => {
        await readHere(k);
        // Its columns known, the rest are read ahead unless the workers read them.
        if (k === 0) ahead = new ReadAhead(o.inputs, blockBytes, run.small ? 0 : undefined);
      },
    );
    const cols: string[] = first?.columns ?? [];
    // The tasks' tables are let go once serialised (threads ended, the inline task dropped), so a
    // wide input's tables are not held twice while the profile is built from their copies.
    let results: ProfileTaskResult[];
    if (run.inline) {
      results = [run.inline.finish()];
      run.inline = null;
    } else if (run.lanes) {
      await run.sender?.drain();
      results = await run.lanes.finish();
      await run.lanes.destroy();
      if (run.columnShares) results = [joinColumnShares(cols, results)];
    } else results = [];
    return { columns: cols, results, inputs, rejects };
  } finally {
    await run.lanes?.destroy();
  }
}

/** How one input is read: every column of the first input wanted (or those a JSON Lines input has). */
interface InputPlan {
  reader: RecordReaderOptions;
  /** Wanted slot -> column of the first input, or null when the slots are the columns. */
  map: number[] | null;
}

/**
 * Learns an input's columns from its first chunks, read with a probe reader (a RecordReader must
 * know its wanted columns before it starts), and plans its real read. The chunks read are handed
 * back, so standard input is still read once.
 */
async function probeInput(
  o: ResolvedProfileOptions,
  k: number,
  first: { columns: string[]; csv: boolean } | null,
  onReject: (r: RejectedRecord) => void,
  it: AsyncIterator<Buffer>,
): Promise<{ plan: InputPlan; columns: string[]; held: Buffer[]; ended: boolean }> {
  const path = o.inputs[k]!;
  const format = detectFormat(path, o.format ?? undefined);
  const base = { format, header: o.header, file: nameInput(path), ...(o.delimiter !== undefined ? { delimiter: o.delimiter } : {}) };
  // Probe: skip (not fail) so a bad first record is left to the real reader's policy.
  const probe = new RecordReader({ ...base, wanted: [], onBadRecord: 'skip' });
  const held: Buffer[] = [];
  let ended = false;
  while (probe.schema === null) {
    const r = await it.next();
    if (r.done) {
      ended = true;
      break;
    }
    held.push(r.value);
    // In slices: the schema is known after a header line or a first object, and a chunk may be
    // a whole small input (see ReadAhead), read in full below.
    for (let at = 0; at < r.value.length && probe.schema === null; at += PROBE_SLICE) probe.push(r.value.subarray(at, at + PROBE_SLICE));
  }
  const own = probe.schema?.columns ?? [];
  let wanted: string[];
  let map: number[] | null = null;
  let expected: string[] | undefined;
  const columns = first?.columns ?? own;
  if (first === null) wanted = columns;
  else if (first.csv && format !== 'jsonl') {
    wanted = columns;
    expected = columns;
  } else {
    // JSON Lines: keys of the first object that are columns of the first input; others are missing.
    wanted = columns.filter((c) => own.includes(c));
    map = wanted.length === columns.length ? null : wanted.map((c) => columns.indexOf(c));
  }
  return { plan: { reader: readerOptions(o, k, wanted, expected, onReject), map }, columns, held, ended };
}

/** How input k is read: the wanted columns, and for a CSV/TSV input after the first, the first's columns its header must give. */
function readerOptions(o: ResolvedProfileOptions, k: number, wanted: string[], expected: string[] | undefined, onReject: (r: RejectedRecord) => void): RecordReaderOptions {
  const path = o.inputs[k]!;
  return {
    format: detectFormat(path, o.format ?? undefined),
    header: o.header,
    file: nameInput(path),
    ...(o.delimiter !== undefined ? { delimiter: o.delimiter } : {}),
    wanted,
    onBadRecord: o.onBadRecord,
    onReject,
    ...(expected ? { expectedColumns: expected, expectedFrom: nameInput(o.inputs[0]!) } : {}),
  };
}
