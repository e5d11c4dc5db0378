/**
 * How many output files a run keeps open at once. The process's soft limit on open files is read
 * where the system tells it (Linux: /proc/self/limits); a quarter of it goes to part files, the
 * rest is left to Node, the worker threads, the spill files (16 a thread) and the inputs.
 */
import { readFileSync } from 'node:fs';
import { flags } from '../flags.js';

/** The soft limit on open files of this process, or null where it cannot be read. */
export function readOpenFileLimit(): number | null {
  try {
    const text = readFileSync('/proc/self/limits', 'utf8');
    const m = /^Max open files\s+(\d+|unlimited)\s/m.exec(text);
    if (!m) return null;
    return m[1] === 'unlimited' ? Number.MAX_SAFE_INTEGER : Number(m[1]);
  } catch {
    return null;
  }
}

/**
 * Part files open at once: a quarter of the limit, from 8 to 512 (256 where the limit is unknown).
 * `ROWDECK_OPEN_PARTS` sets it, for tests and experiments (the output does not depend on it).
 */
export function choosePartFileSlots(limit: number | null = readOpenFileLimit()): number {
  if (flags.openParts !== undefined) return flags.openParts;
  if (limit === null) return 256;
  return Math.max(8, Math.min(512, Math.floor(limit / 4)));
}
