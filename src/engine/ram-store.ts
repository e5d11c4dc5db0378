/**
 * Where the memory layout keeps the spill (see spill.ts): unnamed files in a memory file system
 * where there is one with room, else slabs of shared memory. The main thread opens every file
 * before stage 1 and removes its name at once, so the files cannot be left behind: their memory
 * goes back to the system when they are closed, range by range as stage 2 passes them, or when
 * the process ends, however it ends. Threads share descriptors, so every lane reads them.
 */
import { closeSync, openSync, statfsSync, unlinkSync } from 'node:fs';
import { randomBytes } from 'node:crypto';
import { join } from 'node:path';
import { flags } from '../flags.js';
import { storeAllowance, type SpillStore } from './spill.js';

/** `statfs` type of tmpfs (linux/magic.h). */
const TMPFS_MAGIC = 0x01021994;

/** The memory file system the store's files go to, where it exists. */
export const RAM_DIR = '/dev/shm';

/** Bytes free in `dir` when it is a memory file system, else null. */
function ramRoom(dir: string): number | null {
  try {
    const s = statfsSync(dir);
    if (Number(s.type) !== TMPFS_MAGIC) return null;
    return Number(s.bavail) * Number(s.bsize);
  } catch {
    return null;
  }
}

/** The unnamed files of one store: one per scatter task and range of buckets. */
export class RamFiles {
  /** Per task, per range: a descriptor (-1 once closed). */
  readonly fds: number[][];

  private constructor(fds: number[][]) {
    this.fds = fds;
  }

  /**
   * Opens `tasks` × `ranges` unnamed files in the memory file system when it has room for
   * `bytes`; null where there is none, it is short, or ROWDECK_MEMORY_STORE says `shared`.
   */
  static open(tasks: number, ranges: number, bytes: number, dir = RAM_DIR): RamFiles | null {
    if (flags.memoryStore === 'shared') return null;
    const room = ramRoom(dir);
    if (room === null || room < bytes) return null;
    const tag = `.rowdeck-store-${process.pid}-${randomBytes(4).toString('hex')}`;
    const fds: number[][] = [];
    try {
      for (let t = 0; t < tasks; t++) {
        const row: number[] = [];
        fds.push(row);
        for (let r = 0; r < ranges; r++) {
          const path = join(dir, `${tag}-${t}-${r}`);
          const fd = openSync(path, 'wx+', 0o600);
          row.push(fd);
          unlinkSync(path);
        }
      }
    } catch {
      // Not usable after all (a name left by the failure is removed with it): shared memory instead.
      for (const row of fds) for (const fd of row) closeSync(fd);
      for (let t = 0; t < tasks; t++) for (let r = 0; r < ranges; r++) {
        try {
          unlinkSync(join(dir, `${tag}-${t}-${r}`));
        } catch {
          // not there
        }
      }
      return null;
    }
    return new RamFiles(fds);
  }

  /** Closes every task's file of range r: its memory is freed. */
  closeRange(r: number): void {
    for (const row of this.fds) {
      const fd = row[r]!;
      if (fd < 0) continue;
      row[r] = -1;
      closeSync(fd);
    }
  }

  /** Closes whatever is still open (each descriptor once: a number closed twice could be another file's by then). */
  close(): void {
    for (const row of this.fds) for (let r = 0; r < row.length; r++) {
      const fd = row[r]!;
      if (fd < 0) continue;
      row[r] = -1;
      try {
        closeSync(fd);
      } catch {
        // closed already by the system: nothing to free
      }
    }
  }
}

/** The memory layout's stores, for the spill and (group mode) the census spill, and what frees them. */
export interface MemoryStore {
  store: SpillStore;
  censusStore: SpillStore | null;
  /** Stage 2 has passed a range: its memory can go. */
  onRelease: { spill: (range: number) => void; census: (range: number) => void };
  /** Which store: unnamed files in a memory file system, or shared memory. */
  kind: 'files' | 'shared';
  /** Frees whatever is still held (always call it, after the threads are done with it). */
  close(): void;
}

/**
 * The stores of a run in the memory layout: `bytes` of allowance for `tasks` scatter tasks, the
 * spill in `ranges` ranges (and the census in `censusRanges`, 0 without one), in files of a
 * memory file system with `room` bytes free, else in slabs of `slabBytes` of shared memory.
 */
export function openMemoryStore(tasks: number, ranges: number, censusRanges: number, bytes: number, slabBytes: number, room = bytes): MemoryStore {
  const allowance = storeAllowance(bytes);
  const files = RamFiles.open(tasks, ranges, room);
  const censusFiles = files && censusRanges > 0 ? RamFiles.open(tasks, censusRanges, 0) : null;
  const useFiles = files !== null && (censusRanges === 0 || censusFiles !== null);
  if (!useFiles) {
    files?.close();
    censusFiles?.close();
  }
  const of = (f: RamFiles | null): SpillStore => ({ allowance, files: useFiles ? f!.fds.map((row) => [...row]) : null, slabBytes });
  return {
    store: of(files),
    censusStore: censusRanges > 0 ? of(censusFiles) : null,
    onRelease: { spill: (r) => (useFiles ? files!.closeRange(r) : undefined), census: (r) => (useFiles ? censusFiles?.closeRange(r) : undefined) },
    kind: useFiles ? 'files' : 'shared',
    close: () => {
      if (!useFiles) return;
      files!.close();
      censusFiles?.close();
    },
  };
}
