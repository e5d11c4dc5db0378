/**
 * Sizing a run: how many spill buckets, how much buffer each gets in stage 1, how large the blocks
 * the workers parse are. None of it changes the output (a pure function of seed, inputs and
 * options); it decides time and memory.
 */
import { closeSync, openSync, readSync } from 'node:fs';
import { estimateInputBytes, isStreamInput } from '../io/input.js';
import { HEADER_BYTES } from './spill.js';
import { flags } from '../flags.js';

/**
 * At most this much buffer per bucket and scatter task. Stage 1 writes every byte of its buffers
 * for the first time, and a page first touched costs the kernel a fault; past 64 KiB a bigger
 * buffer does not make the spill's writes faster (docs/benchmarks.md, "What a write costs").
 */
export const BUFFER_CAP = 64 * 1024;

/**
 * How many spill buckets, and how much buffer each gets in stage 1.
 * - A bucket and its output, for every task in flight, must fit the memory budget.
 * - Stage 1 keeps a buffer per bucket and scatter task: many buckets scatter records over many
 *   places in memory, and below ~32 KiB per buffer the writes get small, so a small budget gets
 *   larger buckets instead.
 * - Stage 2 reads a bucket in key order, jumping around it: its key-order copy slows sharply once
 *   a bucket falls out of cache, hence a target of 1.5 MiB (buckets of 0.75-1.5 MiB; the
 *   measurements behind it are in docs/benchmarks.md, "Bucket size").
 */
export function chooseBuckets(spillEstimate: number, memory: number, threads: number, inFlight: number): { bits: number; bufferBytes: number } {
  const memCap = Math.max(64 * 1024, Math.floor(memory / (3 * (inFlight + 1))));
  const target = Math.min(memCap, 1.5 * 1024 * 1024);
  const tasks = Math.max(1, threads);
  const byBuffers = Math.max(1, Math.floor(memory / 4 / (32 * 1024 * tasks)));
  let want = Math.ceil(spillEstimate / target);
  if (want > byBuffers) want = Math.max(byBuffers, Math.ceil(spillEstimate / memCap));
  let bits = Math.min(14, Math.max(0, Math.ceil(Math.log2(Math.max(1, want)))));
  // For experiments only: force the bucket bits (the output does not depend on them).
  if (flags.bucketBits !== undefined) bits = flags.bucketBits;
  const bufferBytes = Math.max(4096 * tasks, Math.min(BUFFER_CAP * tasks, Math.floor(memory / 4 / 2 ** bits)));
  return { bits, bufferBytes };
}

/**
 * The spill's size over the input's: each record gains a 24-byte header and up to 3 bytes of
 * padding, ~1.3× for records of ~93 bytes, but 14× for records of 2 bytes (guessing 1.3 there
 * gave buckets 10 times too large, held past the budget in stage 2). Estimated from the first
 * MiB of the first input that can be read without decompressing (line ends counted, quotes not
 * considered: a guess for the bucket count only); 1.3 otherwise.
 */
export function spillFactor(inputs: string[]): number {
  const path = inputs.find((p) => !isStreamInput(p));
  if (path === undefined) return 1.3;
  let fd = -1;
  try {
    fd = openSync(path, 'r');
    const head = Buffer.allocUnsafe(1 << 20);
    const got = readSync(fd, head, 0, head.length, 0);
    if (got < 2 || (head[0] === 0x1f && head[1] === 0x8b)) return 1.3;
    let lines = 0;
    for (let at = head.indexOf(10, 0); at >= 0 && at < got; at = head.indexOf(10, at + 1)) lines++;
    const perRecord = got / Math.max(1, lines);
    return Math.max(1.3, (perRecord + HEADER_BYTES + 3) / perRecord);
  } catch {
    return 1.3;
  } finally {
    if (fd >= 0) closeSync(fd);
  }
}

/**
 * Size of the blocks workers parse in stage 1: about 1/32 of the budget (4 per worker are held,
 * each with its records' positions), between 256 KiB and 4 MiB.
 */
export function blockBytesFor(memory: number): number {
  return Math.max(256 * 1024, Math.min(4 * 1024 * 1024, 2 ** Math.floor(Math.log2(memory / 32))));
}

/** What a run is cut into: its threads, buckets and buffers. */
export interface RunSize {
  /** Worker threads; 0: everything on the calling thread. */
  threads: number;
  /** Buckets handed to stage 2 at once. */
  inFlight: number;
  spillFactor: number;
  bits: number;
  buckets: number;
  /** Stage 1's buffer per bucket, over all scatter tasks. */
  bufferBytes: number;
  /** Blocks of a plain input parsed by a worker. */
  blockBytes: number;
}

export function sizeRun(o: { inputs: string[]; memory: number; threads: number }): RunSize {
  const threads = o.threads;
  const inFlight = 2 * Math.max(1, threads) + 2;
  const factor = spillFactor(o.inputs);
  const estimate = o.inputs.reduce((a, p) => a + estimateInputBytes(p), 0) * factor;
  const { bits, bufferBytes } = chooseBuckets(estimate, o.memory, threads, inFlight);
  return {
    threads,
    inFlight,
    spillFactor: factor,
    bits,
    buckets: 2 ** bits,
    bufferBytes,
    // Short records (a spill over 1.5x the input): smaller blocks, since a block's record
    // positions (~40 bytes a record) then outweigh its bytes.
    blockBytes: factor <= 1.5 ? blockBytesFor(o.memory) : Math.max(64 * 1024, Math.floor((blockBytesFor(o.memory) * 1.3) / factor)),
  };
}
