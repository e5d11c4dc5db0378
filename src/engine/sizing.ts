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
 * At least this much buffer per bucket and scatter task where the spill goes to files: every
 * full buffer is one write in stage 1 and one read in stage 2, so smaller ones multiply the
 * system calls and the bookkeeping (4 KiB chunks cost ~3.5 µs of system CPU each, a third more
 * than the rest of a record's way, docs/benchmarks.md "Where system time goes at 4 GB").
 */
export const MIN_WRITE = 32 * 1024;

/**
 * Stage 1's buffers take a quarter of the budget, at most this much: a larger budget buys larger
 * buckets, not more buffers (each is memory written for the first time, which costs a page fault
 * a page, and stage 2 takes buckets up to a budget-sized cap anyway).
 */
export const BUFFERS_MAX = 128 * 1024 * 1024;

/** Bytes of stage 1's buffers, over all buckets and tasks. */
export function bufferShare(memory: number): number {
  return Math.min(Math.floor(memory / 4), BUFFERS_MAX);
}

/** The share of the budget the spill may take in memory (the rest: buffers, buckets in flight, parts). */
export const MEMORY_LAYOUT_SHARE = 0.75;

/**
 * How a run keeps its records between the two stages, decided from the spill's estimate over the
 * budget (see chooseBuckets):
 * - `memory`: the spill fits in the budget: stage 1 keeps every bucket's chunks in shared memory
 *   and stage 2 reads them there; no spill file is written.
 * - `spill`: one level of buckets, each small enough for stage 2 and each with a buffer of at
 *   least MIN_WRITE in stage 1, holds it: spill files, read back bucket by bucket. In one
 *   process the first chunks stay in memory as in the memory layout, up to what the budget
 *   leaves (`storeBytes`); only the rest goes to files.
 * - `multi-pass`: larger still: as many buckets as buffers of MIN_WRITE fit in the budget, and
 *   stage 2 scatters each bucket too large for it once more, by its key's next bits, into
 *   sub-buckets it then deals in order (split.ts). Memory stays within the budget at any size.
 */
export type Layout = 'memory' | 'spill' | 'multi-pass';

/** The largest bucket stage 2 takes whole: it and its output, for every bucket in flight, fit the budget. */
export function bucketCap(memory: number, inFlight: number): number {
  return Math.max(64 * 1024, Math.floor(memory / (3 * (inFlight + 1))));
}

/**
 * The bucket size stage 2 aims at: its key-order copy reads a bucket in key order, jumping
 * around it, and slows once a bucket falls out of cache; but every bucket costs stage 1 a buffer
 * written for the first time (a fault a page) and widens what its appends touch. 3 MiB (buckets
 * of 1.5-3 MiB) was fastest on the 1 GB file, ahead of 1.5 and 6 (docs/benchmarks.md, "Bucket
 * size"). Only where stage 2 takes buckets of twice that whole (budgets from ~130 MiB on two
 * threads); below, 1.5 MiB or what it takes whole: there the buckets in flight are most of the
 * budget, stage 1's bucket count is set by its buffers anyway, and larger (sub-)buckets bought
 * no speed (64 MiB: 3 MiB ones raised the 8x run's peak by 12 MiB; 4 MiB: half-sized ones
 * doubled the sub-buckets a split writes to, and their buffers).
 */
export const BUCKET_TARGET = 3 * 1024 * 1024;

export function bucketTarget(memory: number, inFlight: number): number {
  const cap = bucketCap(memory, inFlight);
  return Math.min(cap, cap >= 2 * BUCKET_TARGET ? BUCKET_TARGET : BUCKET_TARGET / 2);
}

export interface BucketChoice {
  bits: number;
  /** Stage 1's buffer per bucket, over all scatter tasks. */
  bufferBytes: number;
  layout: Layout;
}

/**
 * The layout, the number of spill buckets, and how much buffer each gets in stage 1.
 * - `memory` (where allowed: one process) when the spill's estimate is within
 *   MEMORY_LAYOUT_SHARE of the budget.
 * - Otherwise `spill` where one level of buckets holds it: buckets of the target size where that
 *   many buffers of MIN_WRITE a task fit stage 1's share (bufferShare), or fewer, larger ones
 *   up to the cap stage 2 takes whole.
 * - Otherwise `multi-pass`: as many buckets as those buffers allow; stage 2 splits the ones it
 *   cannot take whole.
 * The memory layout takes its buckets by the same rule (stage 2 does not split them: they fit).
 */
export function chooseBuckets(spillEstimate: number, memory: number, threads: number, inFlight: number, allowMemory = false): BucketChoice {
  const cap = bucketCap(memory, inFlight);
  const target = bucketTarget(memory, inFlight);
  const tasks = Math.max(1, threads);
  const log2 = (n: number): number => Math.max(0, Math.ceil(Math.log2(Math.max(1, n))));
  const byTarget = log2(Math.ceil(spillEstimate / target));
  const forced = flags.layout === 'memory' && !allowMemory ? 'spill' : flags.layout;
  let layout: Layout;
  let bits: number;
  if (forced === 'multi-pass') {
    // Buckets 8 times the size stage 2 takes whole (forcedSplit): every one is split.
    layout = 'multi-pass';
    bits = Math.max(0, log2(Math.ceil(spillEstimate / forcedSplit(spillEstimate))) - 3);
  } else {
    // As many buckets as buffers of MIN_WRITE a task fit in stage 1's share.
    const maxBits = Math.floor(Math.log2(Math.max(1, Math.floor(bufferShare(memory) / (MIN_WRITE * tasks)))));
    const byCap = log2(Math.ceil(spillEstimate / cap));
    if (forced === 'memory' || (forced === undefined && allowMemory && spillEstimate <= MEMORY_LAYOUT_SHARE * memory)) layout = 'memory';
    else layout = forced === 'spill' || byCap <= maxBits ? 'spill' : 'multi-pass';
    bits = forced === 'spill' ? byTarget : Math.min(byTarget, maxBits);
  }
  bits = Math.min(14, bits);
  // For experiments only: force the bucket bits (the output does not depend on them).
  if (flags.bucketBits !== undefined) bits = flags.bucketBits;
  const bufferBytes = Math.max(4096 * tasks, Math.min(BUFFER_CAP * tasks, Math.floor(bufferShare(memory) / 2 ** bits)));
  return { bits, bufferBytes, layout };
}

/** ROWDECK_LAYOUT=multi-pass: the size stage 2 takes whole, small enough to split the buckets of a small test input. */
function forcedSplit(spillEstimate: number): number {
  return Math.max(16 * 1024, Math.floor(spillEstimate / 64));
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

/**
 * The young generation of each worker thread's heap, in MiB, under a small budget: V8 grows it
 * while a long run allocates fast, to ~48 MiB an isolate here, memory outside `--memory` (8 GB
 * at 64 MiB peaked at 244 MiB, 184 MiB with it capped at 6 MiB). The cap costs scavenges: 1.03×
 * the CPU and up to 1.09× the wall time on the 1 GB file, so large budgets keep V8's own sizing
 * (undefined). Output bytes do not depend on it.
 */
export function youngGenerationMb(memory: number): number | undefined {
  if (memory >= 512 * 1024 * 1024) return undefined;
  return Math.max(6, Math.min(32, Math.floor(memory / (8 * 1024 * 1024))));
}

/** What a run is cut into: its layout, threads, buckets and buffers. */
export interface RunSize {
  layout: Layout;
  /** The budget these figures come from. */
  memory: number;
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
  /** The spill's estimate in bytes (the inputs' sizes times spillFactor). */
  spillEstimate: number;
  /** Bytes the scatter tasks may keep in memory, together (the memory layout, and the spill layout of one process: its first chunks); 0 otherwise. */
  storeBytes: number;
  /** Stage 2 splits a bucket larger than this (split.ts) into sub-buckets of about `bucketTarget`. */
  bucketCap: number;
  bucketTarget: number;
}

/**
 * Sizes a run. `allowMemory`: the two stages run in this one process (a shuffle), so they can
 * share memory; a plan's tasks are separate processes and always spill to files.
 */
export function sizeRun(o: { inputs: string[]; memory: number; threads: number }, allowMemory = false): RunSize {
  const threads = o.threads;
  // Two a worker and two more keep the workers busy while this thread writes; on the calling
  // thread two let a bucket be dealt while the last one's writes are under way, and more only
  // hold more output (a plan's gather task over a quarter of 1 GB: 8 % slower, 1,600 more page
  // faults, with four).
  const inFlight = threads === 0 ? 2 : 2 * threads + 2;
  const factor = spillFactor(o.inputs);
  const estimate = o.inputs.reduce((a, p) => a + estimateInputBytes(p), 0) * factor;
  const { bits, bufferBytes, layout } = chooseBuckets(estimate, o.memory, threads, inFlight, allowMemory);
  const forcedSplitting = flags.layout === 'multi-pass';
  const cap = forcedSplitting ? forcedSplit(estimate) : bucketCap(o.memory, inFlight);
  const target = forcedSplitting ? Math.max(4096, Math.floor(cap / 2)) : bucketTarget(o.memory, inFlight);
  // What stays for the store once stage 1's buffers and stage 2's buckets in flight have theirs
  // (forced, as much as the spill needs). The spill layout of one process keeps chunks in memory
  // too, up to that, and only the rest goes to files: what the page cache would otherwise hold
  // dirty, and write to the disk once it passes the kernel's dirty limit, stays off the disk.
  // (A forced spill layout keeps none, so that tests see files; ROWDECK_STORE_BYTES sets it.)
  const stored = layout === 'memory' || (layout === 'spill' && allowMemory && (flags.layout !== 'spill' || flags.storeBytes !== undefined));
  let storeBytes = stored ? Math.max(0, Math.floor(o.memory - 2 ** bits * bufferBytes - 3 * inFlight * target)) : 0;
  if (layout === 'memory' && flags.layout === 'memory') storeBytes = Math.max(storeBytes, Math.ceil(2 * estimate) + (64 << 20));
  if (stored && flags.storeBytes !== undefined) storeBytes = flags.storeBytes;
  return {
    layout,
    memory: o.memory,
    threads,
    inFlight,
    spillFactor: factor,
    bits,
    buckets: 2 ** bits,
    bufferBytes,
    // Short records (a spill over 1.5x the input): smaller blocks, since a block's record
    // positions (~40 bytes a record) then outweigh its bytes.
    blockBytes: factor <= 1.5 ? blockBytesFor(o.memory) : Math.max(64 * 1024, Math.floor((blockBytesFor(o.memory) * 1.3) / factor)),
    spillEstimate: estimate,
    storeBytes,
    bucketCap: cap,
    bucketTarget: target,
  };
}
