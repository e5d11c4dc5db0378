/**
 * Writes one output part: plain or gzip, computing the sha256 of the bytes that reach the disk
 * as they are written (no second read). gzip parts are written as members of fixed size, each
 * compressed on libuv's thread pool as soon as it is full (src/io/gzip-members.ts): a part's
 * compressed bytes depend only on its bytes, not on how they were cut into writes, so they are as
 * reproducible as its plain ones.
 *
 * Open files stay bounded whatever the part count: writers that share a `FileSlots` keep at most
 * its limit of files open, and one whose file was closed for another opens it again to append.
 * A writer without a path only hashes and counts: `verify --against` replays a run through the
 * very same code (gathering, gzip, hashing) without writing anything.
 */
import { createHash, type Hash } from 'node:crypto';
import { closeSync, openSync } from 'node:fs';
import { writeAllSync } from './write-all.js';
import { RowdeckError, systemError } from '../errors.js';
import { GzipMembers, type MemberCompressor } from './gzip-members.js';

/**
 * Open output files shared by many writers: at most `limit` at once; opening one more closes the
 * least recently used. (A run used to hold one descriptor per part for all of stage 2, and failed
 * with EMFILE from about 1,000 parts under the common `ulimit -n 1024`.)
 */
export class FileSlots {
  readonly limit: number;
  /** Writers with an open file, least recently used first (a Set keeps insertion order). */
  readonly #open = new Set<PartWriter>();

  constructor(limit: number) {
    this.limit = Math.max(1, Math.floor(limit));
  }

  get openCount(): number {
    return this.#open.size;
  }

  /** Marks `w` as just used. */
  touch(w: PartWriter): void {
    this.#open.delete(w);
    this.#open.add(w);
  }

  /** Makes room for `w` to open its file (closing the least recently used), then counts it as open. */
  admit(w: PartWriter): void {
    while (this.#open.size >= this.limit) {
      const oldest = this.#open.values().next().value as PartWriter;
      this.#open.delete(oldest);
      oldest.closeFile();
    }
    this.#open.add(w);
  }

  drop(w: PartWriter): void {
    this.#open.delete(w);
  }
}

export class PartWriter {
  /** The file written, or null for a writer that only hashes and counts. */
  readonly path: string | null;
  bytes = 0;
  /** Writes shorter than half of this are gathered into a buffer of this size first (0: none). */
  readonly #gatherBytes: number;
  #gathered: Buffer | null = null;
  #gatheredLength = 0;
  #fd = -1;
  /** The file exists (created by this writer): later opens append. */
  #created = false;
  readonly #slots: FileSlots | null;
  /** Null for a piece of a part (a plan's gather task): finish hashes the joined part, and nobody reads a piece's hash. */
  readonly #hash: Hash | null;
  /** The part's gzip members (null: plain). */
  readonly #gzip: GzipMembers | null = null;
  /** The first failure (a coded error); every later call reports it. */
  #failure: RowdeckError | null = null;

  /**
   * `gzip`: the run's compressor (null: a plain part).
   * `gatherBytes`: with many parts, each bucket gives each part only a short slice (a bucket's
   * ~3 MiB over 1,024 parts is ~3 KiB), and a system call per slice cost more than the
   * dealing; slices under half this size are gathered and written together (gzip parts gather
   * into their member instead).
   * `slots`: shared with the run's other writers to bound open files (none: this writer keeps its
   * file open until `close`).
   * `hashed`: false leaves out the sha256 (`close` then gives an empty one).
   */
  constructor(path: string | null, gzip: MemberCompressor | null, gatherBytes = 0, slots: FileSlots | null = null, hashed = true) {
    this.path = path;
    this.#hash = hashed ? createHash('sha256') : null;
    this.#gatherBytes = gzip ? 0 : gatherBytes;
    this.#slots = path === null ? null : slots;
    // Created at once (exclusively), so a name taken by something else is reported before any work.
    if (path !== null) this.#fileFor();
    // Members are written from zlib's callbacks: a failure there (a full disk) is kept by
    // #writeRaw and reported by the next call.
    if (gzip) this.#gzip = new GzipMembers(gzip, (member) => this.#writeRaw(member));
  }

  #fail(err: unknown, doing: string): void {
    this.#failure ??= err instanceof RowdeckError ? err : systemError(err, this.path ?? '(part)', doing);
  }

  #check(): void {
    if (this.#failure) throw this.#failure;
  }

  /** The open descriptor, opening (to create, later to append) where it was closed. */
  #fileFor(): number {
    if (this.#fd >= 0) {
      this.#slots?.touch(this);
      return this.#fd;
    }
    this.#slots?.admit(this);
    try {
      this.#fd = openSync(this.path!, this.#created ? 'a' : 'wx');
    } catch (err) {
      this.#slots?.drop(this);
      throw systemError(err, this.path!, this.#created ? 'opening an output file again' : 'creating an output file');
    }
    this.#created = true;
    return this.#fd;
  }

  /** Closes the file (it is opened again, to append, when next written). Used by FileSlots. */
  closeFile(): void {
    if (this.#fd < 0) return;
    const fd = this.#fd;
    this.#fd = -1;
    try {
      closeSync(fd);
    } catch (err) {
      // A network file system may report a failed write only here.
      this.#fail(err, 'closing an output file');
      throw this.#failure!;
    }
  }

  #writeRaw(buf: Uint8Array): void {
    if (this.path !== null) {
      const fd = this.#fileFor();
      try {
        writeAllSync(fd, buf);
      } catch (err) {
        this.#fail(err, 'writing an output file');
        throw this.#failure!;
      }
    }
    this.#hash?.update(buf);
    this.bytes += buf.byteLength;
  }

  /**
   * Writes bytes. Returns nothing when they are written or kept (plain parts, and gzip ones whose
   * member takes them), else a promise that resolves when they may be reused (a full gzip member
   * waits for a place among the members in flight).
   */
  write(buf: Uint8Array): Promise<void> | undefined {
    this.#check();
    const n = buf.byteLength;
    if (n === 0) return undefined;
    if (this.#gzip) return this.#gzipWrite(buf);
    if (2 * n < this.#gatherBytes && this.#gatheredLength + n <= this.#gatherBytes) {
      this.#gathered ??= Buffer.allocUnsafe(this.#gatherBytes);
      this.#gathered.set(buf, this.#gatheredLength);
      this.#gatheredLength += n;
      return undefined;
    }
    this.#flush();
    if (2 * n < this.#gatherBytes) {
      this.#gathered!.set(buf, 0);
      this.#gatheredLength = n;
    } else this.#writeRaw(buf);
    return undefined;
  }

  /** Writes what was gathered. */
  #flush(): void {
    if (this.#gatheredLength === 0) return;
    const n = this.#gatheredLength;
    this.#gatheredLength = 0;
    this.#writeRaw(this.#gathered!.subarray(0, n));
  }

  #gzipWrite(buf: Uint8Array): Promise<void> | undefined {
    try {
      const taking = this.#gzip!.write(buf);
      if (taking) return taking.catch((err: unknown) => this.#rethrow(err, 'compressing an output file'));
    } catch (err) {
      this.#rethrow(err, 'compressing an output file');
    }
    return undefined;
  }

  /** Throws the writer's first failure (`err` where there was none yet, as a coded error). */
  #rethrow(err: unknown, doing: string): never {
    this.#fail(err, doing);
    throw this.#failure!;
  }

  /** Finishes the file and returns its size and sha256 (empty where not hashed). */
  async close(): Promise<{ bytes: number; sha256: string }> {
    try {
      this.#check();
      this.#flush();
      await this.#gzip?.end();
      this.#check();
    } catch (err) {
      this.#fail(err, 'compressing an output file');
      this.abandon();
      throw this.#failure!;
    }
    this.#slots?.drop(this);
    this.closeFile();
    return { bytes: this.bytes, sha256: this.#hash?.digest('hex') ?? '' };
  }

  /** Closes without finishing (on failure; the file is removed with its folder). */
  abandon(): void {
    this.#gzip?.abandon();
    this.#slots?.drop(this);
    try {
      this.closeFile();
    } catch {
      // Failing anyway: the first failure is the one reported.
    }
  }
}
