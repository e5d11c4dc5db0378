/**
 * Group mode, before the plan: one census bucket's groups counted from its spill files, on a
 * lane (shuffle-worker.ts) or the calling thread (group-census.ts).
 */
import { sortByKey } from '../core/sort.js';
import type { GroupTableData } from '../core/group-table.js';
import { indexSpill, readPieces, sortKeysOf } from './bucket-index.js';
import type { SpillPiece } from './spill.js';

/** Group mode, before the plan: one bucket's groups, counted from its spill files. */
export interface CensusTask {
  census: number;
  pieces: SpillPiece[];
  /** Per scatter task: its stratum ids -> dealing stratum ids. */
  strata: number[][];
  /** Key bits that select the bucket (all its keys share them). */
  bits: number;
}

/**
 * The groups of one bucket, in key order, with their records and classes. Every record of a
 * group has the group's key, and so lies in the bucket of that key: counting bucket by bucket
 * needs no table of all the groups while stage 1 reads (one took ~1 µs a record and 2 tables of
 * every group at 10 M groups). The bucket's records are sorted by key, as stage 2 sorts them, and
 * each run of one key is a group; its first class is that of its first record in (input,
 * offset) order.
 */
export function censusBucket(task: CensusTask): GroupTableData {
  const spillBytes = task.pieces.reduce((a, p) => a + p.length, 0);
  const bytes = new Uint8Array(spillBytes);
  readPieces(task.pieces, bytes);
  const ix = indexSpill(bytes, spillBytes, task.pieces, task.strata);
  const { keyHi, keyLo, stratum } = ix;
  const n = ix.count;
  const order = sortByKey(sortKeysOf(ix, bytes, false), n, task.bits);
  let groups = 0;
  for (let k = 0; k < n; k++) {
    const i = order[k]!;
    if (k === 0 || keyHi[i] !== keyHi[order[k - 1]!] || keyLo[i] !== keyLo[order[k - 1]!]) groups++;
  }
  const out: GroupTableData = { count: groups, hi: new Uint32Array(groups), lo: new Uint32Array(groups), records: new Float64Array(groups), first: new Int32Array(groups), extra: new Float64Array(0) };
  const extra: number[] = [];
  let g = -1;
  let others: Map<number, number> | null = null;
  const flush = (): void => {
    if (others) for (const [s, c] of others) extra.push(g, s, c);
    others = null;
  };
  for (let k = 0; k < n; k++) {
    const i = order[k]!;
    const s = stratum[i]!;
    if (k === 0 || keyHi[i] !== out.hi[g] || keyLo[i] !== out.lo[g]) {
      flush();
      g++;
      out.hi[g] = keyHi[i]!;
      out.lo[g] = keyLo[i]!;
      out.first[g] = s;
    } else if (s !== out.first[g]) {
      others ??= new Map();
      others.set(s, (others.get(s) ?? 0) + 1);
    }
    out.records[g]!++;
  }
  flush();
  out.extra = Float64Array.from(extra);
  return out;
}
