/**
 * Writes to a file in pieces of at most WRITE_MAX bytes. Linux 6.x backs a write's page cache
 * with folios up to the write's size (2 MiB at most). On a VM whose host takes back the guest's
 * free memory in 2 MiB blocks (free page reporting), large folios come from those blocks and are
 * backed again page by page on first touch: writing 1 GB into new pages in 1 MiB writes cost 1.0
 * to 2.5 s of system time here, in 64 or 128 KiB writes 0.25 s (bench/micro/write-chunks.mjs;
 * 0.13 s for every size when the host has taken nothing back). Smaller pieces cost only more
 * system calls (~8,000 a GB).
 */
import { writeSync } from 'node:fs';

export const WRITE_MAX = 128 * 1024;

/** All of `buf`, at `position` (null: where the file stands), in pieces of at most WRITE_MAX; `write` is for tests. */
export function writeAllSync(fd: number, buf: Uint8Array, position: number | null = null, write: typeof writeSync = writeSync): void {
  for (let off = 0; off < buf.byteLength; ) off += write(fd, buf, off, Math.min(WRITE_MAX, buf.byteLength - off), position === null ? null : position + off);
}
