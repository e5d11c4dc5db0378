/**
 * Parallel reading of one plain (uncompressed, seekable) input: worker threads parse blocks of
 * the file, so the parse, usually the largest cost of a pass, is spread over every core.
 *
 *   main thread                                   worker (lane id mod n)
 *   head: first chunk read here (BOM, header,
 *         schema), batches go the usual way
 *   block k: bytes [a_k - 1, a_k+1 + lookahead) ─▶ guess a record start s_k (record-start.ts:
 *                                                   after a line end), parse to the first record start
 *                                                   e_k at or after a_k+1, keep the batch
 *                                    ◀── summary { s_k, e_k, lines, records, ok }
 *   chain, in block order: s_k === e_k-1?
 *     yes ─▶ commit(k, first line) ─────────────▶ line numbers shifted, batch consumed
 *     no  ─▶ recheck(k, e_k-1) ─────────────────▶ parse again from the known start
 *   a block that still fails (a bad record under fail, a record longer than the lookahead) ─▶
 *   the rest of the input is read here, sequentially, exactly as without blocks.
 *
 * Why a guess is safe: from a true record start the parser's work is the same as a sequential
 * read's, so a block whose guessed start equals the previous block's verified end holds exactly
 * the records a sequential read finds there. The guess is wrong only when the line end it takes
 * lies inside a quoted field (record-start.ts passes over those whose next bytes do not read as
 * records); the recheck then costs one more parse of that block.
 * Records refused in a block (skip, quarantine) travel back with the summary and are reported
 * in block order with their true line numbers. Under `fail` a bad record makes the block
 * untrusted, and the sequential read from there raises the error exactly as it always does.
 */
import { open, type FileHandle } from 'node:fs/promises';
import type { InputSchema, RecordBatch, RejectedRecord } from './batch.js';
import type { Answer, BlockJob, BlockMessage, BlockReply, BlockSummary, CommitMessage, DropMessage, RecheckMessage, Released, Reply } from '../workers/protocol.js';
import { checkNotHeaderOnly } from './fields.js';
import { RecordReader, type RecordReaderOptions } from './reader.js';
import { guessStart, shapeOf } from './record-start.js';
import { RowdeckError, ioError } from '../errors.js';
import { flags } from '../flags.js';

const LF = 0x0a;

/** Bytes per block; a few megabytes keep message costs negligible and the lanes busy. */
export const DEFAULT_BLOCK_BYTES = 4 << 20;
/** Bytes read past a block's end so its last record can be finished there. */
export const DEFAULT_LOOKAHEAD_BYTES = 64 << 10;
/** The head read on the main thread (schema, header, BOM). */
const HEAD_BYTES = 1 << 20;
/** Size of the first block handed out; blocks double from there up to the block size. */
const RAMP_BYTES = 64 << 10;

// --- messages (workers/protocol.ts) ------------------------------------------------------------

export type { BlockJob, BlockMessage, BlockReaderOptions, BlockReply, BlockSummary } from '../workers/protocol.js';

// --- worker side ------------------------------------------------------------------------------

interface HeldBlock {
  job: BlockJob;
  batch: RecordBatch | null;
  arrays: BatchArrays | null;
}

/**
 * The worker's half: parses blocks, holds them until the main thread has checked the chain,
 * then hands each batch to `consume` with its true line numbers.
 */
export class BlockHost {
  readonly #consume: (batch: RecordBatch, input: number) => void;
  readonly #readers = new Map<number, RecordReader>();
  readonly #held = new Map<number, HeldBlock>();
  readonly #spareArrays: BatchArrays[] = [];
  #rejects: RejectedRecord[] = [];

  constructor(consume: (batch: RecordBatch, input: number) => void) {
    this.#consume = consume;
  }

  /** Any block work, answered by its kind (a worker's handler table takes the four below instead). */
  handle(m: BlockMessage): Answer<BlockReply> {
    switch (m.kind) {
      case 'block':
        return this.block(m);
      case 'recheck':
        return this.recheck(m);
      case 'commit':
        return this.commit(m);
      case 'drop':
        return this.drop(m);
    }
  }

  /** Parses a new block from its guessed (or known) start, and holds it. */
  block(m: BlockJob): Answer<BlockSummary> {
    const held: HeldBlock = { job: m, batch: null, arrays: null };
    this.#held.set(m.id, held);
    return { result: this.#parse(held, m.exact ? m.origin + m.from : -1) };
  }

  /** Parses a held block again from a known start. */
  recheck(m: RecheckMessage): Answer<BlockSummary> {
    return { result: this.#parse(this.#take(m.id, false), m.start) };
  }

  /** Hands a held block's records on with their true line numbers, and releases its buffer. */
  commit(m: CommitMessage): Answer<Released> {
    const held = this.#take(m.id, true);
    const b = held.batch;
    if (b) {
      const shift = m.lineBase - 1;
      for (let i = 0; i < b.count; i++) b.line[i]! += shift;
      this.#consume(b, held.job.input);
    }
    return this.#release(held);
  }

  /** Forgets a held block, and releases its buffer. */
  drop(m: DropMessage): Answer<Released> {
    return this.#release(this.#take(m.id, true));
  }

  #release(held: HeldBlock): Answer<Released> {
    if (held.arrays) this.#spareArrays.push(held.arrays);
    held.arrays = null;
    held.batch = null;
    const buffer = held.job.buffer;
    return { result: { kind: 'released', id: held.job.id, buffer }, transfer: [buffer] };
  }

  #take(id: number, remove: boolean): HeldBlock {
    const held = this.#held.get(id);
    if (!held) throw new RowdeckError('RDK_INTERNAL', `block ${id} is not held by this worker`);
    if (remove) this.#held.delete(id);
    return held;
  }

  #reader(job: BlockJob): RecordReader {
    let r = this.#readers.get(job.input);
    if (!r) {
      r = new RecordReader({ ...job.reader, onReject: (rec: RejectedRecord) => void this.#rejects.push(rec) });
      r.adoptSchema(job.schema);
      this.#readers.set(job.input, r);
    }
    return r;
  }

  /** Parses a held block from input offset `start` (-1: guess it); keeps the records on success. */
  #parse(held: HeldBlock, start: number): BlockSummary {
    const job = held.job;
    held.batch = null;
    const fail = (at: number): BlockSummary => ({ kind: 'summary', id: job.id, ok: false, start: at, end: -1, lines: 0, records: 0, rejects: [] });
    const d = Buffer.from(job.buffer, 0, job.length);
    let s: number;
    if (start >= 0) s = start - job.origin;
    else {
      s = guessStart(d, job.from - 1, job.stop >= 0 ? job.stop : job.length, shapeOf(job.schema), job.stop < 0, job.length);
      if (s < 0) return fail(-1);
    }
    if (s < 0 || s > job.length) return fail(-1);
    const reader = this.#reader(job);
    this.#rejects = [];
    let batch: RecordBatch | null;
    try {
      batch = reader.parseBlock(d, s, job.stop < 0, job.origin);
    } catch (err) {
      // A bad record under --on-bad-record fail, or garbage from a wrong guess: not trusted.
      if (err instanceof RowdeckError) return fail(job.origin + s);
      throw err;
    }
    const n = batch?.count ?? 0;
    let cut = n;
    let end: number;
    let lines: number;
    let rejects = this.#rejects;
    if (job.stop < 0) {
      end = job.origin + job.length;
      lines = reader.nextLine - 1 + (job.length > s && d[job.length - 1] !== LF ? 1 : 0);
    } else {
      const stopAt = job.origin + job.stop;
      cut = 0;
      while (cut < n && batch!.offset[cut]! < stopAt) cut++;
      // No record starts in the lookahead: the last record is longer than it.
      if (cut === n) return fail(job.origin + s);
      end = batch!.offset[cut]!;
      const endLine = batch!.line[cut]!;
      lines = endLine - 1;
      rejects = this.#rejects.filter((r) => r.line < endLine);
    }
    if (batch && cut > 0) {
      held.arrays ??= this.#spareArrays.pop() ?? new BatchArrays(batch.wanted);
      held.batch = held.arrays.copy(batch, cut);
    }
    return { kind: 'summary', id: job.id, ok: true, start: job.origin + s, end, lines, records: cut, rejects };
  }
}

/**
 * Arrays for the records of one held block. The reader reuses its own arrays, so a held block
 * needs a copy; the copies are pooled, since fresh typed arrays for every block piled up as
 * garbage outside the JS heap (~1.7 MB a block) faster than the collector took it back.
 */
class BatchArrays {
  cap = 0;
  W: number;
  start = new Uint32Array(0);
  end = new Uint32Array(0);
  next = new Uint32Array(0);
  offset = new Float64Array(0);
  line = new Float64Array(0);
  fieldStart = new Uint32Array(0);
  fieldEnd = new Uint32Array(0);
  fieldKind = new Uint8Array(0);

  constructor(W: number) {
    this.W = W;
  }

  /** The first `n` records of `b`, in these arrays. */
  copy(b: RecordBatch, n: number): RecordBatch {
    const W = this.W;
    if (n > this.cap) {
      const cap = Math.max(n, Math.ceil(this.cap * 1.5));
      this.start = new Uint32Array(cap);
      this.end = new Uint32Array(cap);
      this.next = new Uint32Array(cap);
      this.offset = new Float64Array(cap);
      this.line = new Float64Array(cap);
      this.fieldStart = new Uint32Array(cap * W);
      this.fieldEnd = new Uint32Array(cap * W);
      this.fieldKind = new Uint8Array(cap * W);
      this.cap = cap;
    }
    const take = <A extends Uint32Array | Float64Array | Uint8Array>(dst: A, src: A, len: number): A => {
      dst.set(src.subarray(0, len));
      return dst.subarray(0, len) as A;
    };
    return {
      data: b.data,
      count: n,
      start: take(this.start, b.start, n),
      end: take(this.end, b.end, n),
      next: take(this.next, b.next, n),
      offset: take(this.offset, b.offset, n),
      line: take(this.line, b.line, n),
      wanted: W,
      fieldStart: take(this.fieldStart, b.fieldStart, n * W),
      fieldEnd: take(this.fieldEnd, b.fieldEnd, n * W),
      fieldKind: take(this.fieldKind, b.fieldKind, n * W),
    };
  }
}

// --- main-thread side -------------------------------------------------------------------------

/** Lanes that take block work (scatter and profile workers); each message is answered by its kind. */
export interface BlockLanes {
  readonly size: number;
  runOn<M extends BlockMessage>(lane: number, m: M, transfer?: ArrayBuffer[]): Promise<Reply<M>>;
}

export interface ReadInBlocksOptions {
  path: string;
  input: number;
  /** The input's reader options (format, file name, wanted columns, bad-record policy, expected columns). */
  reader: RecordReaderOptions;
  lanes: BlockLanes;
  /** Takes a batch read on this thread (the head, or everything after a fallback), in input order. */
  sequential: (batch: RecordBatch, schema: InputSchema) => Promise<void>;
  /** Called once the schema is known, before any block is handed out. */
  onSchema?: (schema: InputSchema) => void;
  onProgress?: (bytes: number, records: number) => void;
  blockBytes?: number;
  lookaheadBytes?: number;
}

export interface InputTotals {
  schema: InputSchema;
  records: number;
  rejected: number;
  bytes: number;
  /** Blocks parsed on workers, blocks whose guessed start was wrong, and whether a fallback happened. */
  blocks: { parallel: number; rechecked: number; sequentialFrom: number | null };
}

/** Sizes of the blocks; ROWDECK_BLOCK_BYTES and ROWDECK_LOOKAHEAD_BYTES override them (tests, experiments). */
export function blockSizes(o: { blockBytes?: number; lookaheadBytes?: number }): { block: number; lookahead: number } {
  const block = Math.max(16, flags.blockBytes ?? o.blockBytes ?? DEFAULT_BLOCK_BYTES);
  return {
    block,
    lookahead: Math.max(8, flags.lookaheadBytes ?? o.lookaheadBytes ?? DEFAULT_LOOKAHEAD_BYTES),
  };
}

async function readAt(fh: FileHandle, buf: Uint8Array, length: number, position: number, file: string): Promise<number> {
  let got = 0;
  try {
    while (got < length) {
      const { bytesRead } = await fh.read(buf, got, length - got, position + got);
      if (bytesRead === 0) break;
      got += bytesRead;
    }
  } catch (err) {
    throw ioError(err, file, 'reading');
  }
  return got;
}

/**
 * Reads one plain input with the help of the lanes (see the top of this file). Callers check
 * `isPlainFile` first: a gzip file or a pipe must be read as one stream.
 */
export async function readInBlocks(o: ReadInBlocksOptions): Promise<InputTotals> {
  let fh: FileHandle;
  try {
    fh = await open(o.path, 'r');
  } catch (err) {
    throw ioError(err, o.reader.file, 'opening');
  }
  try {
    const size = (await fh.stat()).size;
    const { block: B, lookahead: L } = blockSizes(o);
    const file = o.reader.file;
    const { onReject: _onReject, ...toWorker } = o.reader;
    const reader = new RecordReader(o.reader);
    const totals: Omit<InputTotals, 'schema'> = { records: 0, rejected: 0, bytes: size, blocks: { parallel: 0, rechecked: 0, sequentialFrom: null } };
    // The head: read here until the schema is known (BOM, header, or a JSON Lines first object).
    const at = await pushHere(fh, reader, 0, size, o, Math.min(HEAD_BYTES, B), 0, () => reader.schema !== null);
    // Too small to share: read on here.
    if (at >= size || !reader.schema || size - reader.resumeOffset < 2 * B) {
      await pushHere(fh, reader, at, size, o, HEAD_BYTES, 0);
      await endHere(reader, o);
      return { schema: reader.schema!, ...totals, records: reader.stats.records, rejected: reader.stats.rejected };
    }
    const progress = (pos: number): void => o.onProgress?.(pos, totals.records);
    const schema = reader.schema;
    o.onSchema?.(schema);
    totals.records = reader.stats.records;
    totals.rejected = reader.stats.rejected;
    let expected = reader.resumeOffset;
    let lineBase = reader.nextLine;
    progress(expected);

    const T = o.lanes.size;
    const MAX_HELD = 4 * T;
    const pool: ArrayBuffer[] = [];
    const pending: { id: number; lane: number; reply: Promise<BlockSummary>; settled: boolean }[] = [];
    const settling = new Set<Promise<void>>();
    const failures: { id: number; err: unknown }[] = [];
    let held = 0;
    let nextStart = expected;
    let nextId = 0;

    const release = (id: number, p: Promise<Released>): void => {
      const q: Promise<void> = p
        .then((r) => void pool.push(r.buffer))
        .catch((err: unknown) => void failures.push({ id, err }))
        .finally(() => {
          held--;
          settling.delete(q);
        });
      settling.add(q);
    };
    const dispatch = async (): Promise<void> => {
      const id = nextId++;
      const a = nextStart;
      const exact = id === 0;
      // The first blocks are small and double up to the block size, so every worker has work
      // within a few milliseconds of the start.
      const len = Math.max(Math.min(B, RAMP_BYTES * 2 ** Math.min(id, 24)), Math.min(B, L * 2));
      const last = a + len + L >= size;
      const stop = last ? size : a + len;
      const from = exact ? a : a - 1;
      const to = last ? size : stop + L;
      const need = to - from;
      let buffer = pool.pop();
      if (!buffer || buffer.byteLength < need) buffer = new ArrayBuffer(Math.max(need, B + L + 8));
      const got = await readAt(fh, new Uint8Array(buffer), need, from, file);
      if (got !== need) throw new RowdeckError('RDK_IO', `${file}: the file changed size while being read (expected ${size} bytes). Do not write to an input while it is read.`, { file: file });
      const lane = id % T;
      const job: BlockJob = {
        kind: 'block', id, input: o.input, reader: toWorker, schema,
        buffer, length: need, origin: from, from: a - from, stop: last ? -1 : stop - from, exact,
      };
      const entry = { id, lane, reply: o.lanes.runOn(lane, job, [buffer]), settled: false };
      entry.reply.then(
        () => void (entry.settled = true),
        () => void (entry.settled = true),
      );
      pending.push(entry);
      held++;
      nextStart = stop;
    };
    const drain = async (): Promise<void> => {
      while (settling.size) await Promise.race(settling);
      if (failures.length) {
        failures.sort((x, y) => x.id - y.id);
        throw failures[0]!.err;
      }
    };

    let fellBack = false;
    for (;;) {
      if (failures.length) break;
      while (nextStart < size && held < MAX_HELD) await dispatch();
      const head = pending[0];
      if (!head) {
        if (nextStart >= size) break;
        await Promise.race(settling);
        continue;
      }
      // Commit each block as soon as its summary is in; meanwhile a release lets one more out.
      if (!head.settled) {
        await Promise.race([head.reply, ...settling]).catch(() => {});
        continue;
      }
      pending.shift();
      let s = await head.reply;
      if (s.start !== expected) {
        totals.blocks.rechecked++;
        s = await o.lanes.runOn(head.lane, { kind: 'recheck', id: head.id, start: expected });
      }
      if (!s.ok || s.start !== expected) {
        pending.unshift(head);
        fellBack = true;
        break;
      }
      release(head.id, o.lanes.runOn(head.lane, { kind: 'commit', id: head.id, lineBase }));
      for (const r of s.rejects) {
        // Bytes cross threads as a plain Uint8Array.
        const bytes = Buffer.from(r.bytes.buffer, r.bytes.byteOffset, r.bytes.byteLength);
        o.reader.onReject?.({ ...r, line: r.line + lineBase - 1, bytes });
      }
      totals.rejected += s.rejects.length;
      totals.blocks.parallel++;
      totals.records += s.records;
      lineBase += s.lines;
      expected = s.end;
      progress(expected);
    }
    if (!fellBack && !failures.length && expected !== size) {
      throw new RowdeckError('RDK_INTERNAL', `${file}: parallel reading stopped at byte ${expected} of ${size}.`, { file });
    }
    // Blocks not committed are dropped (after their parse, so the worker still holds them).
    for (const p of pending.splice(0)) release(p.id, p.reply.then(() => o.lanes.runOn(p.lane, { kind: 'drop', id: p.id })));
    await drain();
    if (fellBack) {
      totals.blocks.sequentialFrom = expected;
      const rest = new RecordReader(o.reader);
      rest.adoptSchema(schema);
      rest.resumeAt(expected, lineBase);
      await pushHere(fh, rest, expected, size, o, HEAD_BYTES, totals.records);
      await endHere(rest, o);
      totals.records += rest.stats.records;
      totals.rejected += rest.stats.rejected;
    }
    checkNotHeaderOnly(o.reader, totals.records + totals.rejected);
    return { schema, ...totals };
  } finally {
    await fh.close();
  }
}

/**
 * Pushes the file from `from` through `reader` on this thread, chunk by chunk, until its end or
 * until `enough()`; returns where it stopped. Two buffers alternate, so a batch stays valid while
 * the next chunk is read. `before`: records counted earlier, for progress.
 */
async function pushHere(
  fh: FileHandle,
  reader: RecordReader,
  from: number,
  size: number,
  o: ReadInBlocksOptions,
  chunk: number,
  before: number,
  enough: () => boolean = () => false,
): Promise<number> {
  const bufs = [Buffer.allocUnsafeSlow(chunk), Buffer.allocUnsafeSlow(chunk)];
  let turn = 0;
  let at = from;
  while (at < size && !enough()) {
    const buf = bufs[turn]!;
    turn ^= 1;
    const got = await readAt(fh, buf, Math.min(buf.length, size - at), at, o.reader.file);
    if (got === 0) break;
    at += got;
    const batch = reader.push(buf.subarray(0, got));
    if (batch) await o.sequential(batch, reader.schema!);
    o.onProgress?.(at, before + reader.stats.records);
  }
  return at;
}

/** Ends a reader fed by `pushHere` and hands over its last records. */
async function endHere(reader: RecordReader, o: ReadInBlocksOptions): Promise<void> {
  const batch = reader.end();
  if (batch) await o.sequential(batch, reader.schema!);
}
