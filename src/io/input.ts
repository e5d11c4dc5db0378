/**
 * Adapters from paths and streams to the push parser in reader.ts: format detection, opening
 * (stdin, gzip by magic bytes), and reading several inputs in order with matching headers.
 */

import { closeSync, createReadStream, openSync, readSync, statSync } from 'node:fs';
import { availableParallelism } from 'node:os';
import { open, stat, type FileHandle } from 'node:fs/promises';
import { Readable } from 'node:stream';
import { pipeline } from 'node:stream/promises';
import { createGunzip } from 'node:zlib';
import type { InputFormat, InputSchema, RecordBatch } from './batch.js';
import { batchesOf, RecordReader } from './reader.js';
import type { RecordReaderOptions } from './reader.js';
import { RowdeckError, ioError } from '../errors.js';
import { takePeekedStdin } from './sniff.js';

/** Read size for files: large chunks keep the per-chunk overhead of the parser negligible. */
export const READ_CHUNK_BYTES = 1 << 20;

/**
 * The format of `path`: `explicit` when given, else from the name (.csv .tsv .tab .jsonl .ndjson,
 * each optionally followed by .gz). stdin ('-') without an explicit format is read as CSV.
 */
export function detectFormat(path: string, explicit?: InputFormat): InputFormat {
  if (explicit) return explicit;
  if (path === '-') return 'csv';
  const name = path.toLowerCase().replace(/\.gz$/, '');
  if (name.endsWith('.csv')) return 'csv';
  if (name.endsWith('.tsv') || name.endsWith('.tab')) return 'tsv';
  if (name.endsWith('.jsonl') || name.endsWith('.ndjson')) return 'jsonl';
  throw new RowdeckError('RDK_OPTION', `Cannot tell the format of "${path}" from its name (expected .csv, .tsv, .jsonl or .ndjson, optionally .gz). Pass --format csv|tsv|jsonl.`, { file: path });
}

/**
 * The chunks of an open file from `position` (null: where it stands) to its end, read into three buffers used in
 * turn (sized for what is left, one byte more to see the end in one read, up to READ_CHUNK_BYTES):
 * a long input leaves no trail of 1 MiB buffers for the collector (that trail showed up as memory
 * growing with the input size), and no read faults in fresh memory (a fresh buffer a read cost a
 * scatter task of a quarter of the 1 GB file ~17,000 first touches). The next chunk is read on
 * libuv's thread while the caller uses this one (waiting for each read left a scatter task idle
 * ~70 ms of its ~1 s). A chunk stays valid until the one after next is asked for: the reader's
 * contract (a batch is valid until the next push) is kept with room to spare. Thousands of small
 * parts read back are why the size follows the file.
 */
export async function* chunksInTurn(fh: FileHandle, path: string, position: number | null = null): AsyncGenerator<Buffer> {
  let size = READ_CHUNK_BYTES;
  try {
    // A pipe or device has no size to go by.
    const st = await fh.stat();
    if (st.isFile()) size = Math.max(1, Math.min(READ_CHUNK_BYTES, st.size - (position ?? 0) + 1));
  } catch {
    // The read below reports what is wrong.
  }
  const bufs = [Buffer.allocUnsafeSlow(size), Buffer.allocUnsafeSlow(size), Buffer.allocUnsafeSlow(size)];
  // null: from where the file stands, which a pipe needs (it cannot be read at an offset); one
  // read at a time keeps a pipe's bytes in order.
  let pos = position;
  const readInto = (buf: Buffer): Promise<number> => fh.read(buf, 0, buf.length, pos).then((r) => r.bytesRead);
  let turn = 0;
  let next: Promise<number> | null = readInto(bufs[0]!);
  try {
    for (;;) {
      const buf = bufs[turn]!;
      let got: number;
      try {
        got = await next!;
      } catch (err) {
        throw ioError(err, path, 'reading');
      } finally {
        next = null;
      }
      if (got === 0) return;
      if (pos !== null) pos += got;
      turn = (turn + 1) % 3;
      next = readInto(bufs[turn]!);
      // Its failure is met where it is awaited (above, or below when the caller stops first).
      next.catch(() => {});
      yield buf.subarray(0, got);
    }
  } finally {
    // A caller that stops early closes the file next: the read under way ends first.
    await next?.catch(() => {});
  }
}

/** An uncompressed file's chunks (chunksInTurn). Returns false, having yielded nothing, when the file is gzip-compressed. */
async function* readPlainFile(path: string, counter?: SourceCounter): AsyncGenerator<Buffer, boolean> {
  let fh: FileHandle;
  try {
    fh = await open(path, 'r');
  } catch (err) {
    throw ioError(err, path, 'opening');
  }
  try {
    let first = true;
    for await (const chunk of chunksInTurn(fh, path)) {
      if (first) {
        first = false;
        if (chunk.length >= 2 && chunk[0] === 0x1f && chunk[1] === 0x8b) return false;
      }
      if (counter) counter.bytes += chunk.length;
      yield chunk;
    }
    return true;
  } finally {
    await fh.close();
  }
}

/**
 * Whether an input can only be read once, front to back: standard input, a pipe (including a
 * shell's `<(command)`), a device. A path that cannot be looked at counts as a file; reading it
 * reports the error.
 */
export function isStreamInput(path: string): boolean {
  if (path === '-') return true;
  try {
    return !statSync(path).isFile();
  } catch {
    return false;
  }
}

/**
 * Whether `path` is a regular file that is not gzip-compressed (by its magic bytes 1f 8b): such a
 * file can be read in blocks at any offset. Pipes, devices and standard input are not opened
 * here (opening a pipe would wait for a writer, and reading from it would take its bytes);
 * errors are left to the read that follows, which reports them with the path.
 */
export async function isPlainFile(path: string): Promise<boolean> {
  if (path === '-') return false;
  let fh: FileHandle | null = null;
  try {
    if (!(await stat(path)).isFile()) return false;
    fh = await open(path, 'r');
    const head = Buffer.alloc(2);
    const { bytesRead } = await fh.read(head, 0, 2, 0);
    return !(bytesRead === 2 && head[0] === 0x1f && head[1] === 0x8b);
  } catch {
    return false;
  } finally {
    await fh?.close();
  }
}

/** Display name of an input in messages. */
export function nameInput(path: string): string {
  return path === '-' ? '<stdin>' : path;
}

/**
 * Bytes taken from an input's source so far: the file's or the stream's own bytes, so the
 * compressed ones for gzip. A progress bar over a file's size measures these; the records and
 * the manifest count the bytes after decompression.
 */
export interface SourceCounter {
  bytes: number;
}

/**
 * The bytes of an input: a path, '-' for stdin, or any Readable. Gzip is recognised by its magic
 * bytes (1f 8b), whatever the name, and decompressed on the fly. `counter` counts the source's
 * bytes as they are taken (ahead of decompression by up to a chunk).
 */
export async function* openInput(source: string | Readable, counter?: SourceCounter): AsyncGenerator<Buffer> {
  if (typeof source === 'string' && source !== '-') {
    const plain = yield* readPlainFile(source, counter);
    if (plain) return;
  }
  const name = typeof source === 'string' ? nameInput(source) : '<stream>';
  const stream: Readable =
    typeof source !== 'string' ? source : source === '-' ? process.stdin : createReadStream(source, { highWaterMark: READ_CHUNK_BYTES });
  // Standard input's first bytes may have been read ahead to tell its format (see sniff.ts).
  const ahead = source === '-' ? takePeekedStdin() : null;
  const it = ahead?.it ?? (stream[Symbol.asyncIterator]() as AsyncIterator<Buffer | string>);
  const head: Buffer[] = ahead ? [...ahead.chunks] : [];
  let headLen = head.reduce((a, b) => a + b.length, 0);
  let done = ahead?.done ?? false;
  try {
    // Gather two bytes to look for the gzip magic (a first chunk may be a single byte).
    while (headLen < 2) {
      const r = await it.next();
      if (r.done) { done = true; break; }
      const b = typeof r.value === 'string' ? Buffer.from(r.value) : r.value;
      head.push(b);
      headLen += b.length;
    }
  } catch (err) {
    throw ioError(err, name, 'reading');
  }
  const first = head.length === 1 ? head[0]! : Buffer.concat(head);
  async function* rest(): AsyncGenerator<Buffer> {
    if (counter) counter.bytes += first.length;
    if (first.length > 0) yield first;
    if (done) return;
    for (;;) {
      const r = await it.next();
      if (r.done) return;
      const b = typeof r.value === 'string' ? Buffer.from(r.value) : r.value;
      if (counter) counter.bytes += b.length;
      yield b;
    }
  }
  try {
    if (first.length >= 2 && first[0] === 0x1f && first[1] === 0x8b) {
      const gunzip = createGunzip({ chunkSize: READ_CHUNK_BYTES });
      const piping = pipeline(Readable.from(rest(), { objectMode: false }), gunzip);
      piping.catch(() => {}); // the same error surfaces from iterating gunzip
      for await (const chunk of gunzip) yield chunk as Buffer;
      await piping;
    } else {
      yield* rest();
    }
  } catch (err) {
    if (err instanceof RowdeckError) throw err;
    const e = err as NodeJS.ErrnoException;
    if (typeof e?.code === 'string' && e.code.startsWith('Z_')) {
      throw new RowdeckError('RDK_IO', `${name}: the gzip data is damaged or cut short (${e.message}). Check that the file was fully copied.`, { file: name, errno: e.code });
    }
    throw ioError(err, name, 'reading');
  }
}

export type ReadRecordsOptions = Omit<RecordReaderOptions, 'file' | 'expectedColumns' | 'expectedFrom' | 'format'> & { format?: InputFormat };

/** Reader options for the `k`-th of several inputs: the 2nd…nth CSV/TSV input must have the first's columns. */
export function inputReaderOptions(path: string, opts: ReadRecordsOptions, expected?: { columns: string[]; from: string }): RecordReaderOptions {
  const format = detectFormat(path, opts.format);
  return {
    ...opts,
    format,
    file: nameInput(path),
    ...(format !== 'jsonl' && expected ? { expectedColumns: expected.columns, expectedFrom: expected.from } : {}),
  };
}

/**
 * Reads several inputs in order, yielding each batch with the input's ordinal and schema. The
 * 2nd…nth CSV/TSV input must have the first input's columns. `stats` is that input's reader
 * counters (final once its last batch has been yielded). Batches are valid until the next one.
 */
export async function* readRecords(
  paths: string[],
  opts: ReadRecordsOptions,
): AsyncGenerator<{ input: number; batch: RecordBatch; schema: InputSchema; stats: RecordReader['stats'] }> {
  let expected: { columns: string[]; from: string } | undefined;
  // Everything is read on this thread: any small file may be read ahead (see ReadAhead).
  const ahead = new ReadAhead(paths, READ_AHEAD_MAX_BYTES);
  for (let k = 0; k < paths.length; k++) {
    const path = paths[k]!;
    const ro = inputReaderOptions(path, opts, expected);
    let schema: InputSchema | null = null;
    const whole = await ahead.take(k);
    for await (const got of readInput(path, ro, whole)) {
      schema = got.schema;
      yield { input: k, ...got };
    }
    if (k === 0 && ro.format !== 'jsonl' && schema) expected = { columns: schema.columns, from: ro.file };
  }
}

/**
 * Reads one input with the given reader options, batch by batch (each valid until the next):
 * from `whole`, its bytes when they were read already (see ReadAhead), else from its path.
 */
export async function* readInput(
  path: string,
  ro: RecordReaderOptions,
  whole: Buffer | null = null,
  counter?: SourceCounter,
): AsyncGenerator<{ batch: RecordBatch; schema: InputSchema; stats: RecordReader['stats'] }> {
  const reader = new RecordReader(ro, takeSpareReader());
  if (whole && counter) counter.bytes += whole.length;
  for await (const batch of batchesOf(reader, whole ? [whole] : openInput(path, counter))) yield { batch, schema: reader.schema!, stats: reader.stats };
  // Asked for more after its last batch: the caller is done with it, and so with the reader.
  spareReader = reader;
}

/** The reader of the last input read to its end on this thread, whose arrays the next one takes (see RecordReader's `recycle`). */
let spareReader: RecordReader | null = null;

/** Keeps a reader done with (its batches used up) for the next one to take its arrays. */
export function giveSpareReader(reader: RecordReader): void {
  spareReader = reader;
}

/** The spare reader, if any (each is given out once). */
export function takeSpareReader(): RecordReader | undefined {
  const r = spareReader ?? undefined;
  spareReader = null;
  return r;
}

/** Largest input ReadAhead reads ahead, and how many it has in flight. */
export const READ_AHEAD_MAX_BYTES = 1 << 20;
const READ_AHEAD_INPUTS = 8;

/**
 * Reads small inputs whole, a few ahead of the one being parsed. Each input otherwise takes
 * several trips to the thread pool (looking at it, opening, its size, reading, closing), one after
 * another, while the threads wait: 2,000 files of 100 KB took 4.0-5.5 s to shuffle and 5.1-5.9 s
 * to profile against 1.7 and 1.6 s for the same records in one file. Only regular files of at most
 * READ_AHEAD_MAX_BYTES that are not gzip are taken (at most ~9 MiB in flight); for anything
 * else, or a file whose size changed, take() gives null and the input is read as before, which
 * reports any error with its path.
 *
 * The bytes take() gives stay valid until the next take(): their buffer then goes back to a pool
 * for the reads ahead, so thousands of inputs do not leave thousands of buffers to the collector
 * (that took ~50 MiB more at the peak). Callers are done with an input's batches by then (they
 * are copied to the threads or added to the tables; rejected records are copied as text).
 */
export class ReadAhead {
  readonly #paths: readonly string[];
  readonly #limit: number;
  readonly #reads = new Map<number, Promise<{ bytes: Buffer; buffer: Buffer } | null>>();
  readonly #pool: Buffer[] = [];
  readonly #ahead: number;
  #lent: Buffer | null = null;
  #next = 0;

  /**
   * `blockBytes`: the block size the inputs would be read in. A file under two blocks is read on
   * the calling thread either way (see readInBlocks), so only such files are taken: with
   * the default blocks, every file up to READ_AHEAD_MAX_BYTES.
   */
  constructor(paths: readonly string[], blockBytes: number, ahead = READ_AHEAD_INPUTS) {
    this.#paths = paths;
    this.#limit = Math.min(READ_AHEAD_MAX_BYTES, 2 * blockBytes);
    this.#ahead = ahead;
  }

  /** Input k's bytes when it is a small plain file, else null; starts reading the next ones. */
  async take(k: number): Promise<Buffer | null> {
    if (this.#lent) this.#pool.push(this.#lent);
    this.#lent = null;
    if (this.#paths.length < 2) return null;
    this.#next = Math.max(this.#next, k);
    while (this.#next < this.#paths.length && this.#next <= k + this.#ahead) this.#start(this.#next++);
    const read = this.#reads.get(k);
    this.#reads.delete(k);
    const got = read ? await read : null;
    if (got === null) return null;
    if (got.bytes.length >= 2 && got.bytes[0] === 0x1f && got.bytes[1] === 0x8b) {
      this.#pool.push(got.buffer);
      return null;
    }
    this.#lent = got.buffer;
    return got.bytes;
  }

  #start(k: number): void {
    const path = this.#paths[k]!;
    if (path !== '-') this.#reads.set(k, this.#readSmall(path).catch(() => null));
  }

  /** A regular file of at most the limit, read into a pooled buffer; or null (a pipe is not even opened). */
  async #readSmall(path: string): Promise<{ bytes: Buffer; buffer: Buffer } | null> {
    const st = await stat(path);
    if (!st.isFile() || st.size > this.#limit) return null;
    const fh = await open(path, 'r');
    let buffer: Buffer | null = null;
    try {
      buffer = this.#pool.pop() ?? null;
      if (buffer === null || buffer.length < st.size + 1) buffer = Buffer.allocUnsafeSlow(Math.max(st.size + 1, 64 << 10));
      // One byte more than the size: a file that grew or shrank since it was looked at is read
      // the usual way, which reports it.
      const { bytesRead } = await fh.read(buffer, 0, st.size + 1, 0);
      if (bytesRead !== st.size) return null;
      const got = { bytes: buffer.subarray(0, st.size), buffer };
      buffer = null;
      return got;
    } finally {
      if (buffer !== null) this.#pool.push(buffer);
      await fh.close();
    }
  }
}

/**
 * Inputs under this size (uncompressed, as far as it is known) are shuffled and profiled on the
 * calling thread by default, as `verify` reads small outputs (a shuffle without column statistics
 * on two cores or fewer: under INLINE_MAX_BYTES_TWO_CORES, see inlineMaxBytes). A worker thread takes ~0.1 s to
 * start here (an isolate, its modules and their WebAssembly): the example's shuffle took
 * 0.24-0.29 s on the calling thread against 0.40-0.43 s on two workers (0.51-0.54 s when each
 * stage started its own), a 20 MB file's profile 0.48 s against 0.83 s.
 */
export const INLINE_MAX_BYTES = 32 * 1024 * 1024;

/**
 * The same, on a machine of two cores or fewer, for work that reads records but keeps no column
 * statistics (a shuffle without --stats): there the workers share the cores with the calling
 * thread, which reads and hands them the records, and two of them gain less than their start and
 * hand-offs cost until ~200-270 MB. Measured on 2 cores (`shuffle --partitions 8 --stratify
 * fault`, alternating runs): 100 MB 0.85-0.89 s on the calling thread against 1.14-1.21 s on two
 * workers, 200 MB 1.49-1.51 s against 1.62-1.72 s, 1 GB 6.4-6.9 s against 4.7 s; 61 MB of 2,002
 * columns 0.51-0.52 s against 0.78-0.79 s. Column statistics make a record's work heavier and
 * the workers pay off sooner (the 61 MB file with --stats: 11.5 s on the calling thread against
 * 6.3 s; `profile` of it 2.64 s against 2.47 s), so they keep INLINE_MAX_BYTES, as do machines
 * of more cores, which were not measured here.
 */
export const INLINE_MAX_BYTES_TWO_CORES = 192 * 1024 * 1024;

/**
 * Below how many bytes of input a command works on the calling thread by default, with `cores`
 * cores and (`statistics`) column statistics to keep or not.
 */
export function inlineMaxBytes(cores: number = availableParallelism(), statistics = false): number {
  return cores <= 2 && !statistics ? INLINE_MAX_BYTES_TWO_CORES : INLINE_MAX_BYTES;
}

/** Size of the uncompressed data of a gzip file, from its trailer (mod 2^32), or a guess. */
export function estimateInputBytes(path: string): number {
  // A stream cannot be looked into without taking its bytes: guess.
  if (isStreamInput(path)) return 1024 ** 3;
  const st = statSync(path);
  let fd = -1;
  try {
    fd = openSync(path, 'r');
    const head = Buffer.alloc(2);
    readSync(fd, head, 0, 2, 0);
    if (head[0] !== 0x1f || head[1] !== 0x8b || st.size < 18) return st.size;
    const tail = Buffer.alloc(4);
    readSync(fd, tail, 0, 4, st.size - 4);
    return Math.max(tail.readUInt32LE(0), st.size * 4);
  } finally {
    if (fd >= 0) closeSync(fd);
  }
}

/** Whether the inputs are small enough to do on the calling thread (false when any size is unknown). */
export function smallInputs(paths: string[], statistics = false, cores: number = availableParallelism()): boolean {
  try {
    return paths.reduce((a, p) => a + estimateInputBytes(p), 0) < inlineMaxBytes(cores, statistics);
  } catch {
    return false;
  }
}
