/**
 * Where stage 1's chunks lie: the spill files (one per scatter task and range of buckets, see
 * spill.ts), and the stores of the memory layout.
 *
 * In the memory layout (sizing.ts) a chunk stays in memory instead of going to the file, in one
 * of two stores (ram-store.ts decides which):
 * - a file in a memory file system (tmpfs), one per task and range, opened and unlinked by the
 *   main thread before stage 1, so that it has no name and its memory goes back to the system
 *   when it is closed or the process ends however it ends; any thread reads it by its
 *   descriptor. Its pages belong to the kernel: writing a chunk is one copy, with no page of the
 *   process's own to fault in (on the benchmark machine a fresh page of the process cost ~10 µs,
 *   a store of slabs took ~9× as long to fill as this one: docs/benchmarks.md);
 * - slabs of shared memory (SharedArrayBuffers, one range each) that stage 2's threads read
 *   directly, where no memory file system is at hand.
 * Every scatter task's chunks draw on one shared allowance (`SpillStore.allowance`, KiB, taken
 * with Atomics); once it is spent (or the memory file system is full), chunks go to the spill
 * files as in the other layouts, so an estimate that was too low costs speed, never more memory
 * than the budget.
 */

/** Spill files a scatter task writes at most: one per range of buckets. */
export const SPILL_FILES = 16;

/** The file of scatter task `task` for bucket range `range`. */
export function spillFileName(task: number, range = 0): string {
  return `scatter-${String(task).padStart(4, '0')}-${String(range).padStart(2, '0')}.spill`;
}

/** How many ranges `buckets` buckets fall into, and how many buckets one range holds. */
export function spillRanges(buckets: number): { ranges: number; perRange: number } {
  const ranges = Math.min(buckets, SPILL_FILES);
  return { ranges, perRange: Math.ceil(buckets / ranges) };
}

/**
 * Where part of one bucket's records lie: a chunk of one task's spill file, of an unnamed file in
 * memory (`fd`), or of a slab of shared memory (`memory`); `path` is empty for the last two.
 * `task` -1: the records' stratum words already hold dealing strata (a bucket split in stage 2,
 * see split.ts), not a scatter task's own ids.
 */
export interface SpillPiece {
  task: number;
  path: string;
  offset: number;
  length: number;
  fd?: number;
  memory?: SharedArrayBuffer;
}

/** Stage 1 keeps chunks in memory (the memory layout). */
export interface SpillStore {
  /** KiB all scatter tasks may still keep: an Int32Array(1) on this buffer, used with Atomics. */
  allowance: SharedArrayBuffer;
  /**
   * Per scatter task, per range of buckets: the descriptor of an unnamed file in a memory file
   * system (ram-store.ts); null: slabs of shared memory.
   */
  files: number[][] | null;
  /** Bytes of a slab (a chunk larger than that gets a slab of its own size). */
  slabBytes: number;
}

/** A chunk's place: its range's spill file, or its range's file in memory; 0 and up: a slab. */
export const IN_FILE = -1;
export const IN_RAM_FILE = -2;

/** A store's shared allowance for `bytes`. */
export function storeAllowance(bytes: number): SharedArrayBuffer {
  const sab = new SharedArrayBuffer(4);
  new Int32Array(sab)[0] = Math.min(0x7fffffff, Math.floor(bytes / 1024));
  return sab;
}

/** The chunks a writer made: (bucket, place, offset, length) each; place IN_FILE, IN_RAM_FILE or a slab's index. */
export const CHUNK_FIELDS = 4;
