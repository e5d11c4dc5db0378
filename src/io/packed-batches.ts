/**
 * Record batches across threads: a batch packed into one transferable buffer and back
 * (packBatch, unpackBatch), and BatchSender, which posts batches read on the calling thread to
 * worker lanes with bounded memory. Used by `shuffle` (stage 1) and `profile`.
 */
import type { RecordBatch } from './batch.js';
import type { BatchMessage, Reply } from '../workers/protocol.js';

/**
 * Packs a batch (records re-based to 0) into one transferable buffer:
 * [header 8 × f64][data][start u32][end u32][next u32][fieldStart u32][fieldEnd u32][offset f64][line f64][fieldKind u8]
 */
export function packBatch(b: RecordBatch, input: number, reuse: ArrayBuffer | undefined): ArrayBuffer {
  const n = b.count;
  const W = b.wanted;
  // Records are kept at their offsets from the start of the reader's buffer (usually the first
  // record's offset is 0 or a header's length), so the position arrays copy with one memcpy
  // each; only a far-off start is cut and re-based.
  const base = n > 0 && b.start[0]! > 1 << 22 ? b.start[0]! : 0;
  const dataLen = n > 0 ? b.next[n - 1]! - base : 0;
  const dataPad = (dataLen + 7) & ~7;
  const size = 64 + dataPad + n * 4 * 3 + n * W * 4 * 2 + ((n * 8 * 2 + 7) & ~7) + ((n * W + 7) & ~7) + 16;
  const ab = reuse && reuse.byteLength >= size ? reuse : new ArrayBuffer(Math.ceil(size * 1.25));
  const head = new Float64Array(ab, 0, 8);
  head[0] = n;
  head[1] = W;
  head[2] = dataLen;
  head[3] = input;
  let at = 64;
  new Uint8Array(ab, at, dataLen).set(b.data.subarray(base, base + dataLen));
  at += dataPad;
  const rebase = (src: Uint32Array, len: number, shift: number): void => {
    const dst = new Uint32Array(ab, at, len);
    if (shift === 0) dst.set(src.subarray(0, len));
    else for (let i = 0; i < len; i++) dst[i] = src[i]! - shift;
    at += len * 4;
  };
  rebase(b.start, n, base);
  rebase(b.end, n, base);
  rebase(b.next, n, base);
  rebase(b.fieldStart, n * W, base);
  rebase(b.fieldEnd, n * W, base);
  at = (at + 7) & ~7;
  new Float64Array(ab, at, n).set(b.offset.subarray(0, n));
  at += n * 8;
  new Float64Array(ab, at, n).set(b.line.subarray(0, n));
  at += n * 8;
  new Uint8Array(ab, at, n * W).set(b.fieldKind.subarray(0, n * W));
  return ab;
}

/** Worker lanes that take packed batches (scatter and profile workers); a batch is answered with its buffer, released for reuse. */
export interface BatchLanes {
  readonly size: number;
  run<M extends BatchMessage>(m: M, transfer: ArrayBuffer[]): Promise<Reply<M>>;
  runOn<M extends BatchMessage>(lane: number, m: M, transfer: ArrayBuffer[]): Promise<Reply<M>>;
}

/**
 * Posts batches read on the main thread to worker lanes as packed buffers: at most two waiting
 * or running per worker (bounded memory, and the reader pauses), each buffer coming back for
 * reuse (allocating ~1 MiB per batch costs page faults). A batch goes to one lane, or with
 * `everyLane` to each of them (lanes that share out columns, see `columnShare` in
 * src/engine/profile/task.ts).
 */
export class BatchSender {
  readonly #lanes: BatchLanes;
  readonly #everyLane: boolean;
  readonly #spare: ArrayBuffer[] = [];
  readonly #running = new Set<Promise<void>>();

  constructor(lanes: BatchLanes, everyLane = false) {
    this.#lanes = lanes;
    this.#everyLane = everyLane;
  }

  /** Sends a batch; the batch may be reused once this resolves (it is copied). */
  async send(batch: RecordBatch, input: number): Promise<void> {
    if (batch.count === 0) return;
    if (!this.#everyLane) return this.#post(batch, input, -1);
    for (let lane = 0; lane < this.#lanes.size; lane++) await this.#post(batch, input, lane);
  }

  /** Packs and posts one copy of the batch, to `lane` or (-1) to any lane. */
  async #post(batch: RecordBatch, input: number, lane: number): Promise<void> {
    while (this.#running.size >= 2 * this.#lanes.size) await Promise.race(this.#running);
    const buffer = packBatch(batch, input, this.#spare.pop());
    const m: BatchMessage = { kind: 'batch', buffer };
    const p: Promise<void> = (lane < 0 ? this.#lanes.run(m, [buffer]) : this.#lanes.runOn(lane, m, [buffer]))
      .then((back) => void this.#spare.push(back.buffer))
      .finally(() => this.#running.delete(p));
    p.catch(() => {});
    this.#running.add(p);
  }

  /** Waits for every batch sent; rethrows a worker's error. */
  async drain(): Promise<void> {
    await Promise.all(this.#running);
  }
}

export function unpackBatch(ab: ArrayBuffer): { batch: RecordBatch; input: number } {
  const head = new Float64Array(ab, 0, 8);
  const n = head[0]!;
  const W = head[1]!;
  const dataLen = head[2]!;
  let at = 64;
  const data = Buffer.from(ab, at, dataLen);
  at += (dataLen + 7) & ~7;
  const u32 = (len: number): Uint32Array => {
    const a = new Uint32Array(ab, at, len);
    at += len * 4;
    return a;
  };
  const start = u32(n);
  const end = u32(n);
  const next = u32(n);
  const fieldStart = u32(n * W);
  const fieldEnd = u32(n * W);
  at = (at + 7) & ~7;
  const offset = new Float64Array(ab, at, n);
  at += n * 8;
  const line = new Float64Array(ab, at, n);
  at += n * 8;
  const fieldKind = new Uint8Array(ab, at, n * W);
  return { batch: { data, count: n, start, end, next, offset, line, wanted: W, fieldStart, fieldEnd, fieldKind }, input: head[3]! };
}
