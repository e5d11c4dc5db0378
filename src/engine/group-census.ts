/**
 * The groups of `--group` gathered between the stages: the lanes count each bucket's groups from
 * its spill (censusBucket in gather.ts) and hand back one list a bucket; the table is those lists
 * joined in bucket order, which is key order (see src/core/group-table.ts).
 */
import { closeSync, openSync, readSync, rmSync, writeSync } from 'node:fs';
import { GroupTable, type GroupTableData } from '../core/group-table.js';
import { RowdeckError } from '../errors.js';

/**
 * Joins the buckets' lists in bucket order (GroupTable.assemble) without holding them all:
 * the lists come back in any order, and each is written to a file as soon as it and every one
 * before it are in, keeping only its classes other than the first (few, as a rule). build() then
 * reads the file into one table. Holding every list and then the joined table took ~40 bytes a
 * group at once (10.8 M groups: ~430 MB); this holds the table and a few lists.
 */
export class GroupTableBuilder {
  readonly #path: string;
  #fd: number;
  readonly #waiting = new Map<number, GroupTableData>();
  readonly #counts: number[] = [];
  readonly #extras: Float64Array[] = [];
  #at = 0;

  constructor(path: string) {
    this.#path = path;
    this.#fd = openSync(path, 'w+');
  }

  /** List `index` (0, 1, 2, …, each once, in any order). */
  add(index: number, d: GroupTableData): void {
    this.#waiting.set(index, d);
    for (let next = this.#waiting.get(this.#counts.length); next; next = this.#waiting.get(this.#counts.length)) {
      this.#waiting.delete(this.#counts.length);
      this.#at = writeArraysAt(this.#fd, [next.hi, next.lo, next.records, next.first].map((a) => a.subarray(0, next.count)), this.#at);
      this.#counts.push(next.count);
      this.#extras.push(next.extra);
    }
  }

  /** The table of every list added; the file is removed. */
  build(): GroupTable {
    let at = 0;
    try {
      if (this.#waiting.size > 0) throw new RowdeckError('ERR_INTERNAL', `group census: the list of bucket ${this.#counts.length} never came back.`);
      return GroupTable.assemble(this.#counts, this.#extras, (bytes) => {
        for (let got = 0; got < bytes.length; ) {
          const n = readSync(this.#fd, bytes, got, bytes.length - got, at + got);
          if (n === 0) throw new RowdeckError('ERR_INTERNAL', `group census: ${this.#path} ended early.`);
          got += n;
        }
        at += bytes.length;
      });
    } finally {
      this.close();
    }
  }

  /** Closes and removes the file (also after a failure). */
  close(): void {
    if (this.#fd < 0) return;
    closeSync(this.#fd);
    this.#fd = -1;
    rmSync(this.#path, { force: true });
  }
}

/** The sorted key -> cell table for the lanes (groups.bin): the keys' hi and lo words, then the cells. */
export function writeGroupsFile(path: string, hi: Uint32Array, lo: Uint32Array, cells: Uint32Array): void {
  const fd = openSync(path, 'w');
  try {
    writeArraysAt(fd, [hi, lo, cells], 0);
  } finally {
    closeSync(fd);
  }
}

/** Writes typed arrays one after the other from byte `at` of a file; returns where they end. */
function writeArraysAt(fd: number, arrays: (Uint32Array | Int32Array | Float64Array)[], at: number): number {
  for (const a of arrays) {
    const view = new Uint8Array(a.buffer, a.byteOffset, a.byteLength);
    for (let put = 0; put < view.length; ) put += writeSync(fd, view, put, view.length - put, at + put);
    at += view.length;
  }
  return at;
}
