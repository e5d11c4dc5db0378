/**
 * gzip parts as a series of members. RFC 1952 (section 2.2) lets a gzip file be several members
 * one after another, and gunzip, zcat and node:zlib read them as one stream. Member k of a part
 * holds the part's uncompressed bytes [k·M, (k+1)·M), M from the number of parts alone
 * (`memberBytesFor`), each compressed on its own. A member is then a function of its bytes, so
 * members are compressed in parallel (on libuv's thread pool, through node:zlib) and written in
 * order, and a part's file is the same whatever the threads, the memory budget, the buckets or
 * the process that joins the slices (`rowdeck finish`).
 *
 *   part bytes ──▶ member buffer (M bytes) ──full──▶ zlib (thread pool) ─┐
 *                                                                        ▼ in member order
 *                                                         out(compressed member): the part file
 */
import { gzip } from 'node:zlib';

/** gzip's own default, as `gzip` without a level uses. */
export const DEFAULT_GZIP_LEVEL = 6;

/** Largest member (of uncompressed bytes): past it a member compresses no better (~0.3 % from 1 MiB to 16 MiB of sensor CSV, level 6). */
export const MEMBER_BYTES_MAX = 1 << 20;
/** Smallest member: below it each member's empty start costs too much (64 KiB: ~5 % larger than 1 MiB members). */
export const MEMBER_BYTES_MIN = 64 << 10;
/** Every part keeps its unfinished member: with many parts members get smaller, so these stay within this in all. */
const UNFINISHED_BYTES = 16 << 20;

/**
 * Uncompressed bytes a member holds, for a run of `parts` parts: the largest power of two from
 * 64 KiB to 1 MiB whose `parts` members fit 16 MiB (1 MiB up to 16 parts, 64 KiB from 129). It
 * depends on the part count only, never on the memory budget or the threads: it decides the bytes.
 */
export function memberBytesFor(parts: number): number {
  let m = MEMBER_BYTES_MAX;
  while (m > MEMBER_BYTES_MIN && m * Math.max(1, parts) > UNFINISHED_BYTES) m /= 2;
  return m;
}

/** The thread pool's size: node:zlib compresses there (UV_THREADPOOL_SIZE, 4 by default). */
function threadPoolSize(): number {
  const n = Number(process.env.UV_THREADPOOL_SIZE);
  return Number.isInteger(n) && n > 0 ? n : 4;
}

/**
 * Members being compressed at once, for a budget: two per thread of the pool keeps it busy while
 * finished members are written; fewer where each member's buffers (its bytes, the compressed copy
 * and zlib's ~270 KB) would take more than an eighth of the budget, but at least two.
 */
export function membersInFlightFor(memory: number, memberBytes: number): number {
  return Math.max(2, Math.min(2 * threadPoolSize(), Math.floor(memory / 8 / (2 * memberBytes))));
}

/**
 * What every part's members share in a run: the level, the member size, the bound on members in
 * flight over all parts (`acquire`/`release`), and spare member buffers.
 */
export class MemberCompressor {
  readonly level: number;
  readonly memberBytes: number;
  readonly limit: number;
  #inFlight = 0;
  readonly #waiting: (() => void)[] = [];
  readonly #spare: Buffer[] = [];

  constructor(level: number, memberBytes: number, limit: number) {
    this.level = level;
    this.memberBytes = memberBytes;
    this.limit = Math.max(1, limit);
  }

  /** Members given to zlib and not yet written (for tests). */
  get inFlight(): number {
    return this.#inFlight;
  }

  /** A buffer for a member's bytes. */
  takeBuffer(): Buffer {
    return this.#spare.pop() ?? Buffer.allocUnsafe(this.memberBytes);
  }

  giveBack(b: Buffer): void {
    this.#spare.push(b);
  }

  /** A place for one more member in flight: nothing when there is one now, else a promise of it. */
  acquire(): Promise<void> | undefined {
    if (this.#inFlight < this.limit) {
      this.#inFlight++;
      return undefined;
    }
    return new Promise<void>((resolve) => this.#waiting.push(resolve));
  }

  /** A member is written (or given up): its place goes to the first waiting, if any. */
  release(): void {
    const next = this.#waiting.shift();
    if (next) next();
    else this.#inFlight--;
  }

  /** Compresses one member on the thread pool; `data` must stay unchanged until `done`. */
  compress(data: Buffer, done: (err: Error | null, member: Buffer) => void): void {
    // One output chunk for the whole member (deflate's bound: 5 bytes per 16 KiB stored block,
    // plus the header and trailer), so zlib does not come back to this thread for more room.
    gzip(data, { level: this.level, chunkSize: data.length + (data.length >> 10) + 1024 }, done);
  }
}

/**
 * One part's members: its bytes are cut into members of `memberBytes`, each compressed as soon as
 * it is full, and handed to `out` in order. `out` may throw (a full disk): the error is kept and
 * thrown by the next `write` or by `end`.
 */
export class GzipMembers {
  readonly #c: MemberCompressor;
  readonly #out: (member: Buffer) => void;
  #buffer: Buffer | null = null;
  #fill = 0;
  #sealed = 0;
  /** Members sealed and not yet written, in order; `member` set once compressed. */
  readonly #queue: { done: boolean; member: Buffer | null }[] = [];
  #failure: unknown = null;
  #abandoned = false;
  #idle: (() => void) | null = null;

  constructor(c: MemberCompressor, out: (member: Buffer) => void) {
    this.#c = c;
    this.#out = out;
  }

  get failure(): unknown {
    return this.#failure;
  }

  /**
   * Takes bytes. Returns nothing when they are taken (copied), else a promise that resolves once
   * they are (a full member waited for a place in flight); `buf` must stay unchanged until then.
   */
  write(buf: Uint8Array): Promise<void> | undefined {
    if (this.#failure) throw this.#failure;
    let at = 0;
    while (at < buf.byteLength) {
      this.#buffer ??= this.#c.takeBuffer();
      const n = Math.min(buf.byteLength - at, this.#buffer.length - this.#fill);
      this.#buffer.set(buf.subarray(at, at + n), this.#fill);
      this.#fill += n;
      at += n;
      if (this.#fill === this.#buffer.length) {
        const waiting = this.#c.acquire();
        if (waiting) {
          const rest = buf.subarray(at);
          return waiting.then(() => {
            if (this.#abandoned) return this.#c.release();
            this.#seal();
            return this.write(rest);
          });
        }
        this.#seal();
      }
    }
    return undefined;
  }

  /** Compresses the member in the buffer (a place in flight is held for it). */
  #seal(): void {
    const buffer = this.#buffer;
    const data = buffer ? buffer.subarray(0, this.#fill) : Buffer.alloc(0);
    this.#buffer = null;
    this.#fill = 0;
    this.#sealed++;
    const entry: { done: boolean; member: Buffer | null } = { done: false, member: null };
    this.#queue.push(entry);
    this.#c.compress(data, (err, member) => {
      if (buffer) this.#c.giveBack(buffer);
      if (err) this.#failure ??= err;
      else entry.member = member;
      entry.done = true;
      this.#drain();
    });
  }

  /** Writes the compressed members at the head of the queue, in order. */
  #drain(): void {
    while (this.#queue.length > 0 && this.#queue[0]!.done) {
      const { member } = this.#queue.shift()!;
      this.#c.release();
      if (member === null || this.#failure !== null || this.#abandoned) continue;
      try {
        this.#out(member);
      } catch (err) {
        this.#failure = err;
      }
    }
    if (this.#queue.length === 0 && this.#idle) {
      const idle = this.#idle;
      this.#idle = null;
      idle();
    }
  }

  /** Compresses the last member and waits until every member is written. A part of no bytes is one empty member (a valid gzip file). */
  async end(): Promise<void> {
    if (this.#failure) throw this.#failure;
    if (this.#fill > 0 || this.#sealed === 0) {
      await this.#c.acquire();
      this.#seal();
    }
    if (this.#queue.length > 0) await new Promise<void>((resolve) => (this.#idle = resolve));
    if (this.#failure) throw this.#failure;
  }

  /** Gives up (on failure): members still compressing are dropped when they come back. */
  abandon(): void {
    this.#abandoned = true;
    if (this.#buffer) this.#c.giveBack(this.#buffer);
    this.#buffer = null;
    this.#fill = 0;
  }
}
