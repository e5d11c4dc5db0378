/**
 * Writes one output part: plain or gzip, computing the sha256 of the bytes that reach the disk
 * as they are written (no second read). gzip runs on libuv's thread pool through zlib, and its
 * output depends only on the bytes fed, not on how they were cut into writes, so a part's
 * compressed bytes are as reproducible as its plain ones.
 */
import { createHash, type Hash } from 'node:crypto';
import { closeSync, openSync, writeSync } from 'node:fs';
import { createGzip, type Gzip } from 'node:zlib';
import { ioError } from '../errors.js';

export class PartWriter {
  readonly path: string;
  bytes = 0;
  /** Writes shorter than half of this are gathered into a buffer of this size first (0: none). */
  readonly #gatherBytes: number;
  #gathered: Buffer | null = null;
  #gatheredLength = 0;
  #fd: number;
  #hash: Hash = createHash('sha256');
  #gzip: Gzip | null = null;
  #gzError: Error | null = null;
  #gzDone: Promise<void> | null = null;

  /**
   * `gatherBytes`: with many parts, each bucket gives each part only a short slice (a bucket's
   * ~1.5 MiB over 1,024 parts is ~1.5 KiB), and a system call per slice cost more than the
   * dealing; slices under half this size are gathered and written together.
   */
  constructor(path: string, gzip: boolean, gatherBytes = 0) {
    this.path = path;
    this.#gatherBytes = gatherBytes;
    try {
      this.#fd = openSync(path, 'wx');
    } catch (err) {
      throw ioError(err, path, 'creating an output file');
    }
    if (gzip) {
      const gz = createGzip({ level: 6 });
      gz.on('data', (chunk: Buffer) => this.#writeRaw(chunk));
      this.#gzDone = new Promise<void>((resolve, reject) => {
        gz.on('end', resolve);
        gz.on('error', (e) => {
          this.#gzError = e;
          reject(e);
        });
      });
      this.#gzDone.catch(() => {});
      this.#gzip = gz;
    }
  }

  #writeRaw(buf: Uint8Array): void {
    let off = 0;
    try {
      while (off < buf.byteLength) off += writeSync(this.#fd, buf, off, buf.byteLength - off);
    } catch (err) {
      throw ioError(err, this.path, 'writing an output file');
    }
    this.#hash.update(buf);
    this.bytes += buf.byteLength;
  }

  /**
   * Writes bytes. Returns nothing when they were only gathered (the common case with many parts:
   * no promise to wait for), else a promise that resolves when they may be reused (gzip applies
   * backpressure).
   */
  write(buf: Uint8Array): Promise<void> | undefined {
    const n = buf.byteLength;
    if (n === 0) return undefined;
    if (2 * n < this.#gatherBytes && this.#gatheredLength + n <= this.#gatherBytes) {
      this.#gathered ??= Buffer.allocUnsafe(this.#gatherBytes);
      this.#gathered.set(buf, this.#gatheredLength);
      this.#gatheredLength += n;
      return undefined;
    }
    return this.#writeOn(buf);
  }

  async #writeOn(buf: Uint8Array): Promise<void> {
    await this.#flush();
    if (2 * buf.byteLength < this.#gatherBytes) {
      this.#gathered!.set(buf, 0);
      this.#gatheredLength = buf.byteLength;
    } else await this.#pass(buf);
  }

  /** Passes on what was gathered. */
  async #flush(): Promise<void> {
    if (this.#gatheredLength === 0) return;
    const n = this.#gatheredLength;
    this.#gatheredLength = 0;
    await this.#pass(this.#gathered!.subarray(0, n));
  }

  async #pass(buf: Uint8Array): Promise<void> {
    if (!this.#gzip) {
      this.#writeRaw(buf);
      return;
    }
    if (this.#gzError) throw ioError(this.#gzError, this.path, 'compressing an output file');
    // zlib may keep a reference to the chunk until it is processed: give it its own copy.
    const ok = this.#gzip.write(Buffer.from(buf));
    if (!ok) await new Promise<void>((resolve) => this.#gzip!.once('drain', resolve));
  }

  /** Finishes the file and returns its size and sha256. */
  async close(): Promise<{ bytes: number; sha256: string }> {
    try {
      await this.#flush();
      if (this.#gzip) {
        this.#gzip.end();
        await this.#gzDone;
      }
    } catch (err) {
      throw ioError(err, this.path, 'compressing an output file');
    } finally {
      closeSync(this.#fd);
    }
    return { bytes: this.bytes, sha256: this.#hash.digest('hex') };
  }

  /** Closes without finishing (on failure; the file is removed with its folder). */
  abandon(): void {
    try {
      this.#gzip?.destroy();
      closeSync(this.#fd);
    } catch {
      // already closed
    }
  }
}
