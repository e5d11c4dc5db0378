/**
 * One bucket's spill read and indexed, for stage 2 (gather.ts) and the group census
 * (census-bucket.ts): its pieces read one after another, each record's header, key, length and
 * dealing stratum, and the order keys that sort it. The per-record arrays are reused from
 * bucket to bucket on a thread.
 */
import { closeSync, openSync, readSync } from 'node:fs';
import type { SortKeys } from '../core/sort.js';
import { ioError } from '../errors.js';
import { HEADER_BYTES, HEADER_WORDS, type SpillPiece } from './spill.js';

/**
 * Reads every piece (chunks of spill files or slabs of memory) into `bytes`, one after another.
 * Pieces that lie end to end in one file are read with one call.
 */
export function readPieces(pieces: SpillPiece[], bytes: Uint8Array): void {
  let at = 0;
  let fd = -1;
  let open = '';
  try {
    for (let k = 0; k < pieces.length; k++) {
      const p = pieces[k]!;
      if (p.memory) {
        bytes.set(new Uint8Array(p.memory, p.offset, p.length), at);
        at += p.length;
        continue;
      }
      // Join the next pieces of the same file that follow on without a gap.
      let length = p.length;
      while (k + 1 < pieces.length && !pieces[k + 1]!.memory && pieces[k + 1]!.path === p.path && pieces[k + 1]!.fd === p.fd && pieces[k + 1]!.offset === p.offset + length) length += pieces[++k]!.length;
      if (p.fd !== undefined) {
        // A file in memory, open for the whole run (see ram-store.ts).
        open = 'a file in memory';
        for (let got = 0; got < length; ) {
          const r = readSync(p.fd, bytes, at + got, length - got, p.offset + got);
          if (r === 0) throw new Error(`file in memory ends early at ${p.offset + got}`);
          got += r;
        }
        at += length;
        continue;
      }
      if (p.path !== open) {
        if (fd >= 0) closeSync(fd);
        fd = -1;
        fd = openSync(p.path, 'r');
        open = p.path;
      }
      let got = 0;
      while (got < length) {
        const r = readSync(fd, bytes, at + got, length - got, p.offset + got);
        if (r === 0) throw new Error(`spill file ends early at ${p.offset + got}`);
        got += r;
      }
      at += length;
    }
  } catch (err) {
    throw ioError(err, open, 'reading a spill file');
  } finally {
    if (fd >= 0) closeSync(fd);
  }
}

export interface BucketIndex {
  u32: Uint32Array;
  /** Word index of each record's header. */
  at: Uint32Array;
  keyHi: Uint32Array;
  keyLo: Uint32Array;
  /** Content length << 2 | terminator. */
  lenTerm: Uint32Array;
  /** Dealing stratum. */
  stratum: Uint32Array;
  count: number;
}

/**
 * The index of a bucket's spill bytes (its pieces read one after another into `bytes`): each
 * record's header, key, length and stratum, mapped by its scatter task's `strata` (a piece of
 * task -1 holds dealing strata already). Chunks are whole records.
 */
export function indexSpill(bytes: Uint8Array, spillBytes: number, pieces: SpillPiece[], strata: number[][]): BucketIndex {
  const maxRecords = Math.floor(spillBytes / HEADER_BYTES);
  const ix: BucketIndex = {
    u32: new Uint32Array(bytes.buffer, bytes.byteOffset, spillBytes >>> 2),
    at: scratch(0, maxRecords),
    keyHi: scratch(1, maxRecords),
    keyLo: scratch(2, maxRecords),
    lenTerm: scratch(3, maxRecords),
    stratum: scratch(4, maxRecords),
    count: 0,
  };
  const pieceEnds: number[] = [];
  let end = 0;
  for (const p of pieces) pieceEnds.push((end += p.length));
  indexBucket(ix, pieceEnds, pieces.map((p) => (p.task < 0 ? null : strata[p.task]!)));
  return ix;
}

function indexBucket(ix: BucketIndex, pieceEnds: number[], pieceStrata: (number[] | null)[]): void {
  const { u32, at, keyHi, keyLo, lenTerm, stratum } = ix;
  let n = 0;
  let w = 0;
  let maps: Map<number[], Int32Array> | null = null;
  for (let t = 0; t < pieceEnds.length; t++) {
    const wordEnd = pieceEnds[t]! >>> 2;
    const given = pieceStrata[t]!;
    if (given === null) {
      // Dealing strata already (a split bucket's records).
      while (w < wordEnd) {
        const lt = u32[w + 5]!;
        at[n] = w;
        keyHi[n] = u32[w]!;
        keyLo[n] = u32[w + 1]!;
        stratum[n] = u32[w + 4]!;
        lenTerm[n] = lt;
        n++;
        w += HEADER_WORDS + (((lt >>> 2) + 3) >>> 2);
      }
      continue;
    }
    // Many pieces of one task share its map: made once a bucket.
    maps ??= new Map();
    let map = maps.get(given);
    if (!map) maps.set(given, (map = Int32Array.from(given)));
    while (w < wordEnd) {
      const lt = u32[w + 5]!;
      at[n] = w;
      keyHi[n] = u32[w]!;
      keyLo[n] = u32[w + 1]!;
      stratum[n] = map[u32[w + 4]!]!;
      lenTerm[n] = lt;
      n++;
      w += HEADER_WORDS + (((lt >>> 2) + 3) >>> 2);
    }
  }
  ix.count = n;
}

// Per-record arrays reused from bucket to bucket: a worker deals one bucket after another, and
// fresh arrays each time cost page faults and collector work.
// The Float64 ones hold the sparse counts' lists and table (countEntries copies out what it returns).
const SCRATCH: Uint32Array[] = [];
const SCRATCH64: Float64Array[] = [];

function reuse<T extends Uint32Array | Float64Array>(pool: T[], k: number, count: number, make: (n: number) => T): T {
  const have = pool[k];
  if (have && have.length >= count) return have.subarray(0, count) as T;
  const a = make(Math.ceil(count * 1.25) + 16);
  pool[k] = a;
  return a.subarray(0, count) as T;
}

export function scratch(k: number, count: number): Uint32Array {
  return reuse(SCRATCH, k, count, (n) => new Uint32Array(n));
}

export function scratch64(k: number, count: number): Float64Array {
  return reuse(SCRATCH64, k, count, (n) => new Float64Array(n));
}

/**
 * How a bucket's records are ordered: by key, then identity. Where the identity words hold the
 * cell's hash instead (GatherPlan.cellKeyInHeader), two records can tie on both (a collision of
 * the 64-bit identity hash within one group or key): their bytes decide, and records whose
 * bytes are equal too are interchangeable, so the output does not depend on which came first.
 */
export function sortKeysOf(ix: BucketIndex, bytes: Uint8Array, cellKeyInHeader: boolean): SortKeys {
  const { u32, at, keyHi, keyLo, lenTerm } = ix;
  const keys: SortKeys = { keyHi, keyLo, identity: (i) => identityOf(u32, at[i]!) };
  if (cellKeyInHeader) {
    keys.tie = (a, b) => {
      const la = lenTerm[a]! >>> 2;
      const lb = lenTerm[b]! >>> 2;
      const sa = at[a]! * 4 + HEADER_BYTES;
      const sb = at[b]! * 4 + HEADER_BYTES;
      return Buffer.compare(bytes.subarray(sa, sa + la), bytes.subarray(sb, sb + lb));
    };
  }
  return keys;
}

/** (input ordinal, byte offset) of the record whose header starts at word `w`. */
function identityOf(u32: Uint32Array, w: number): [number, number] {
  return [u32[w + 3]! & 0xffff, (u32[w + 3]! >>> 16) * 0x100000000 + u32[w + 2]!];
}
