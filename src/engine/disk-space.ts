/**
 * The check a shuffle makes before it reads a record: is there room on the disks for what it
 * will write? Estimated from the inputs' sizes: spill files of about `spillFactor` times the
 * input where the layout spills (none in the memory layout), parts of about the input's size (a
 * third with gzip; twice with `--order spread`, whose work files hold every part once more). On
 * one file system the spill is removed range by range as the parts are written, so the most it
 * holds at once is about the spill and one range's parts. A shortfall is RDK_NO_SPACE naming the
 * folder, the figures and --temp-dir, instead of RDK_DISK_FULL minutes later.
 */
import { statfsSync, statSync } from 'node:fs';
import { dirname } from 'node:path';
import { RowdeckError } from '../errors.js';
import { SPILL_FILES } from './spill.js';

/** Bytes free for this user on the file system of `path`, or null where that cannot be told. */
export function freeBytes(path: string): number | null {
  try {
    const s = statfsSync(path);
    return Number(s.bavail) * Number(s.bsize);
  } catch {
    return null;
  }
}

function deviceOf(path: string): number | null {
  try {
    return statSync(path).dev;
  } catch {
    return null;
  }
}

/** 1.3 GB, 850 MB, 12 kB. */
export function formatSize(n: number): string {
  if (n >= 1e9) return `${(n / 1e9).toFixed(1)} GB`;
  if (n >= 1e6) return `${(n / 1e6).toFixed(n >= 1e8 ? 0 : 1)} MB`;
  return `${Math.max(1, Math.round(n / 1e3))} kB`;
}

export interface SpaceNeed {
  /** The spill's folder, and the bytes of spill files expected there (0: the spill stays in memory). */
  spillDir: string;
  spillBytes: number;
  /** Where the parts are written (null: nothing is written, a replay), and their expected bytes. */
  outDir: string | null;
  partBytes: number;
  /** The output as the user named it, for the message. */
  out: string;
}

/** Throws RDK_NO_SPACE where a folder's file system has less room than the run expects to write there. */
export function checkFreeSpace(n: SpaceNeed, free: (path: string) => number | null = freeBytes): void {
  const spill = n.spillBytes;
  const parts = n.outDir === null ? 0 : n.partBytes;
  if (spill <= 0 && parts <= 0) return;
  const shared = n.outDir !== null && deviceOf(n.spillDir) !== null && deviceOf(n.spillDir) === deviceOf(n.outDir);
  const fmt = formatSize;
  const fail = (dir: string, need: number, have: number, what: string): never => {
    throw new RowdeckError(
      'RDK_NO_SPACE',
      `${dir}: not enough free space: this run needs about ${fmt(need)} there (${what}), and ${fmt(have)} is free. Nothing was written. Free some space, or give --temp-dir a folder on a disk with room for the spill (the parts go to --out), or a larger --memory (a spill that fits in it takes no disk).`,
      { file: dir, need, free: have },
    );
  };
  // Named as the user knows them: the folder the spill's hidden folder is in, and --out.
  const spillShown = dirname(n.spillDir);
  if (shared) {
    const have = free(n.spillDir);
    // The spill shrinks range by range as the parts grow.
    const need = Math.max(spill + parts / SPILL_FILES, parts);
    if (have !== null && have < need) {
      fail(spillShown, need, have, `spill files of ~${fmt(spill)} and parts of ~${fmt(parts)} for ${n.out}, on one disk: the spill is removed range by range as the parts are written`);
    }
    return;
  }
  if (spill > 0) {
    const have = free(n.spillDir);
    if (have !== null && have < spill) fail(spillShown, spill, have, `spill files: the records and 24 bytes each; the parts, ~${fmt(parts)}, go to ${n.out}`);
  }
  if (parts > 0) {
    const have = free(n.outDir!);
    if (have !== null && have < parts) fail(n.out, parts, have, `the parts; the spill, ~${fmt(spill)}, goes to ${spillShown}`);
  }
}
