/**
 * gzip parts as a series of members. RFC 1952 (section 2.2) lets a gzip file be several members
 * one after another, and gunzip, zcat and node:zlib read them as one stream. Member k of a part
 * holds the part's uncompressed bytes [k·M, (k+1)·M), M from the number of parts alone
 * (`memberBytesFor`), each compressed on its own. A member is then a function of its bytes, so
 * members are compressed in parallel (on libuv's thread pool, through node:zlib) and written in
 * order, and a part's file is the same whatever the threads, the memory budget, the buckets or
 * the process that joins the slices (`rowdeck finish`).
 *
 *   part bytes ──▶ its unfinished member ──full──▶ zlib (thread pool) ─┐
 *                  (in memory; with many parts                       ▼ in member order
 *                   for the budget, partly in a file)     out(compressed member): the part file
 *
 * Every part holds its unfinished member. Where those would take more than a share of the budget
 * (many parts, a small budget), each part keeps at most its share in memory and appends the rest
 * to a file in the spill folder (`ParkFile`), read back when the member is complete: where the
 * bytes wait never changes the member, so never the output.
 */
import { closeSync, openSync, readSync, rmSync } from 'node:fs';
import { writeAllSync } from './write-all.js';
import { join } from 'node:path';
import { gzip } from 'node:zlib';
import { systemError } from '../errors.js';

/** gzip's own default, as `gzip` without a level uses. */
export const DEFAULT_GZIP_LEVEL = 6;

/** Largest member (of uncompressed bytes): past it a member compresses no better (~0.3 % from 1 MiB to 16 MiB of sensor CSV, level 6). */
export const MEMBER_BYTES_MAX = 1 << 20;
/** Smallest member: below it each member's empty start costs too much (64 KiB: ~5 % larger than 1 MiB members). */
export const MEMBER_BYTES_MIN = 64 << 10;
/** Every part keeps its unfinished member: with many parts members get smaller, so these stay within this in all. */
const UNFINISHED_BYTES = 16 << 20;
/** The least of an unfinished member a part keeps in memory before it parks it (the part writers' gathering floor). */
const KEEP_BYTES_MIN = 8 << 10;

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
 * and zlib's ~270 KB) would take more than a sixteenth of the budget, but at least two.
 */
export function membersInFlightFor(memory: number, memberBytes: number): number {
  return Math.max(2, Math.min(2 * threadPoolSize(), Math.floor(memory / 16 / (2 * memberBytes))));
}

/**
 * How much of its unfinished member each of `parts` parts keeps in memory: an eighth of the budget
 * over all parts (as the plain parts' gathering), at least 8 KiB; the whole member where that is
 * more than a member.
 */
export function keepBytesFor(memory: number, parts: number, memberBytes: number): number {
  return Math.min(memberBytes, Math.max(KEEP_BYTES_MIN, Math.floor(memory / 8 / Math.max(1, parts))));
}

/** Where parked bytes went: a piece of the park file. */
interface Parked {
  at: number;
  length: number;
}

/**
 * The file that holds unfinished members' bytes past what their parts keep in memory: appended
 * to, read back when a member is complete, removed when the last part is done with it. Made on
 * first use, in the run's spill folder.
 */
export class ParkFile {
  readonly path: string;
  #fd = -1;
  #size = 0;

  constructor(dir: string) {
    this.path = join(dir, 'gzip-unfinished.bin');
  }

  /** Bytes appended so far (for tests). */
  get size(): number {
    return this.#size;
  }

  append(data: Uint8Array): Parked {
    try {
      if (this.#fd < 0) this.#fd = openSync(this.path, 'wx+');
      writeAllSync(this.#fd, data, this.#size);
    } catch (err) {
      throw systemError(err, this.path, 'writing unfinished gzip members to the spill folder');
    }
    const piece = { at: this.#size, length: data.byteLength };
    this.#size += data.byteLength;
    return piece;
  }

  /** Reads `pieces` one after another into `into` from offset 0. */
  readInto(pieces: Parked[], into: Buffer): void {
    let to = 0;
    try {
      for (const p of pieces) {
        for (let got = 0; got < p.length; ) {
          const n = readSync(this.#fd, into, to + got, p.length - got, p.at + got);
          if (n === 0) throw new Error(`${this.path} ended early: it was changed during the run`);
          got += n;
        }
        to += p.length;
      }
    } catch (err) {
      throw systemError(err, this.path, 'reading unfinished gzip members back from the spill folder');
    }
  }

  close(): void {
    if (this.#fd < 0) return;
    try {
      closeSync(this.#fd);
    } catch {
      // Only read back from; the run's spill folder goes anyway.
    }
    this.#fd = -1;
    rmSync(this.path, { force: true });
  }
}

/**
 * What every part's members share in a run: the level, the member size, the bound on members in
 * flight over all parts (`acquire`/`release`), spare member buffers, and where bytes past a part's
 * share of memory wait (`keepBytes`, the park file).
 */
export class MemberCompressor {
  readonly level: number;
  readonly memberBytes: number;
  readonly limit: number;
  /** Bytes of its unfinished member a part keeps in memory (the whole member: nothing is parked). */
  readonly keepBytes: number;
  readonly #parkDir: string | null;
  #park: ParkFile | null = null;
  #inFlight = 0;
  readonly #waiting: (() => void)[] = [];
  readonly #spare: Buffer[] = [];
  /** Parts writing through this compressor (the park file closes after the last). */
  #users = 0;

  /**
   * `park`: where a part's unfinished member past `keepBytes` waits (a folder), and how much it
   * keeps in memory (see `keepBytesFor`); null: every part keeps its whole member in memory.
   */
  constructor(level: number, memberBytes: number, limit: number, park: { dir: string; keepBytes: number } | null = null) {
    this.level = level;
    this.memberBytes = memberBytes;
    this.limit = Math.max(1, limit);
    this.keepBytes = park ? Math.min(memberBytes, Math.max(1, park.keepBytes)) : memberBytes;
    this.#parkDir = park && this.keepBytes < memberBytes ? park.dir : null;
  }

  /** Members given to zlib and not yet written (for tests). */
  get inFlight(): number {
    return this.#inFlight;
  }

  /** The park file, made on first use. */
  get parkFile(): ParkFile {
    if (this.#parkDir === null) throw new Error('no folder to park unfinished members in');
    return (this.#park ??= new ParkFile(this.#parkDir));
  }

  /** Bytes parked so far (for tests). */
  get parkedBytes(): number {
    return this.#park?.size ?? 0;
  }

  /** A buffer for a whole member's bytes. */
  takeBuffer(): Buffer {
    return this.#spare.pop() ?? Buffer.allocUnsafe(this.memberBytes);
  }

  /** A member's buffer back; kept only as many as can be in flight. */
  giveBack(b: Buffer): void {
    if (b.length === this.memberBytes && this.#spare.length <= this.limit) this.#spare.push(b);
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

  attach(): void {
    this.#users++;
  }

  /** A part is done (or given up): after the last, the park file goes. */
  detach(): void {
    if (--this.#users === 0) {
      this.#park?.close();
      this.#park = null;
    }
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
  /** The unfinished member's bytes in memory (after its parked ones): `keepBytes` long. */
  #buffer: Buffer | null = null;
  #fill = 0;
  /** The unfinished member's first bytes, parked. */
  #parked: Parked[] = [];
  #parkedBytes = 0;
  #sealed = 0;
  /** Members sealed and not yet written, in order; `member` set once compressed. */
  readonly #queue: { done: boolean; member: Buffer | null }[] = [];
  #failure: unknown = null;
  #finished = false;
  #idle: (() => void) | null = null;

  constructor(c: MemberCompressor, out: (member: Buffer) => void) {
    this.#c = c;
    this.#out = out;
    c.attach();
  }

  /**
   * Takes bytes. Returns nothing when they are taken (copied, or parked), else a promise that
   * resolves once they are (a full member waited for a place in flight); `buf` must stay unchanged
   * until then.
   */
  write(buf: Uint8Array): Promise<void> | undefined {
    if (this.#failure) throw this.#failure;
    const M = this.#c.memberBytes;
    let at = 0;
    while (at < buf.byteLength) {
      this.#buffer ??= this.#c.keepBytes === M ? this.#c.takeBuffer() : Buffer.allocUnsafe(this.#c.keepBytes);
      const n = Math.min(buf.byteLength - at, this.#buffer.length - this.#fill, M - this.#parkedBytes - this.#fill);
      this.#buffer.set(buf.subarray(at, at + n), this.#fill);
      this.#fill += n;
      at += n;
      if (this.#parkedBytes + this.#fill === M) {
        const waiting = this.#c.acquire();
        if (waiting) {
          const rest = buf.subarray(at);
          return waiting.then(() => {
            if (this.#finished) return this.#c.release();
            this.#seal();
            return this.write(rest);
          });
        }
        this.#seal();
      } else if (this.#fill === this.#buffer.length) {
        this.#parked.push(this.#c.parkFile.append(this.#buffer.subarray(0, this.#fill)));
        this.#parkedBytes += this.#fill;
        this.#fill = 0;
      }
    }
    return undefined;
  }

  /** Compresses the unfinished member (a place in flight is held for it). */
  #seal(): void {
    let data: Buffer;
    // The buffer handed to zlib, back to the compressor when done (null: none, or the part's own).
    let lent: Buffer | null = null;
    if (this.#parkedBytes > 0) {
      lent = this.#c.takeBuffer();
      this.#c.parkFile.readInto(this.#parked, lent);
      if (this.#fill > 0) this.#buffer!.copy(lent, this.#parkedBytes, 0, this.#fill);
      data = lent.subarray(0, this.#parkedBytes + this.#fill);
    } else if (this.#buffer && this.#c.keepBytes === this.#c.memberBytes) {
      lent = this.#buffer;
      this.#buffer = null;
      data = lent.subarray(0, this.#fill);
    } else data = Buffer.from(this.#buffer?.subarray(0, this.#fill) ?? Buffer.alloc(0));
    this.#fill = 0;
    this.#parked = [];
    this.#parkedBytes = 0;
    this.#sealed++;
    const entry: { done: boolean; member: Buffer | null } = { done: false, member: null };
    this.#queue.push(entry);
    this.#c.compress(data, (err, member) => {
      if (lent) this.#c.giveBack(lent);
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
      if (member === null || this.#failure !== null || this.#finished) continue;
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
    try {
      if (this.#failure) throw this.#failure;
      if (this.#fill > 0 || this.#parkedBytes > 0 || this.#sealed === 0) {
        await this.#c.acquire();
        this.#seal();
      }
      if (this.#queue.length > 0) await new Promise<void>((resolve) => (this.#idle = resolve));
      if (this.#failure) throw this.#failure;
    } finally {
      this.#finish();
    }
  }

  /** Gives up (on failure): members still compressing are dropped when they come back. */
  abandon(): void {
    this.#finish();
  }

  #finish(): void {
    if (this.#finished) return;
    this.#finished = true;
    this.#buffer = null;
    this.#fill = 0;
    this.#parked = [];
    this.#parkedBytes = 0;
    this.#c.detach();
  }
}
