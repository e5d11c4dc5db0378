/**
 * Stage 2 for one bucket: load its spill files, sort the records by key, deal each one to its
 * cell from its stratum rank, and lay out each part's slice of output bytes. Pure apart from
 * reading the spill files, so a worker thread, a process or another machine can run it.
 */
import { buildDealTable, cellOf, hashedCell, stratumPermutations, type DealTable } from '../core/deal.js';
import { permuteRanks } from '../core/permute.js';
import { Fingerprint } from '../core/hash.js';
import { sortByKey } from '../core/sort.js';
import type { TableStats } from '../core/stats.js';
import { partCount, type GatherPlan } from './plan.js';
import { HEADER_BYTES, HEADER_WORDS, type SpillPiece } from './spill.js';
import { gatherKernel } from './gather-kernel.js';
import { partReader } from './part-stats.js';
import { indexSpill, readPieces, scratch, scratch64, sortKeysOf, type BucketIndex } from './bucket-index.js';
import { flags } from '../flags.js';

export interface GatherTask {
  /** The bucket (of the plan's buckets) the records belong to; a split bucket's sub-buckets name their bucket. */
  bucket: number;
  /** Where the records lie: chunks of the scatter tasks' spill files or slabs, or of a split's files. */
  pieces: SpillPiece[];
  /** Key bits every record here shares (default: the plan's `bits`; more for a sub-bucket, see split.ts). */
  shared?: number;
  /** Rank, within each dealing stratum, of the first record of that stratum in this bucket (used up by the dealing). */
  rankStart: Float64Array;
  /**
   * A buffer to reuse (one an earlier task returned). Recycling keeps memory bounded: freed
   * buffers would otherwise wait for a garbage collection that large external allocations do
   * not prompt soon enough.
   */
  arena?: ArrayBuffer;
}

export interface GatherResult {
  bucket: number;
  /** All parts' output bytes for this bucket, part after part. */
  data: Uint8Array;
  /** `partStart[p]`..`partStart[p+1]`: part p's bytes within `data`. */
  partStart: Float64Array;
  /**
   * Records written per part, fold and stratum, at `(part * K + fold) * strata + s`: every entry,
   * or, where there are many more entries than records in the bucket (many parts, folds and
   * strata), only those that are not 0 (in no particular order).
   */
  counts: Float64Array | SparseCounts;
  /** Order-independent fingerprint per part of the record contents written (fold column excluded). */
  fingerprints: { hi: number; lo: number; count: number }[];
  /**
   * `--order spread`: `data` and `partStart` are by unit (part × stratum: unit = part · strata +
   * stratum, each in key order), with every record's size in that order and each unit's records.
   */
  spread?: { sizes: Uint32Array; records: Uint32Array };
  /** With ROWDECK_PHASES=1: milliseconds spent in load, sort, deal, copy. */
  phases?: number[];
}

export interface SparseCounts {
  index: Float64Array;
  value: Float64Array;
}

/** Adds a bucket's counts (either form) to a whole table of them. */
export function addCounts(total: Float64Array, counts: Float64Array | SparseCounts): void {
  if (counts instanceof Float64Array) {
    for (let i = 0; i < counts.length; i++) total[i]! += counts[i]!;
  } else {
    const { index, value } = counts;
    for (let j = 0; j < index.length; j++) total[index[j]!]! += value[j]!;
  }
}

/** One bucket's groups for the dealing: keys in order and each group's cell (groups.bin's run). */
export interface BucketGroups {
  keyHi: Uint32Array;
  keyLo: Uint32Array;
  cell: Uint32Array;
}

/**
 * The whole group table, for buckets whose records may belong to any group: each group's key and
 * cell side by side (one cache line a look-up, not three), and a directory of the keys' top bits
 * (entries dir[k] up to dir[k + 1] have top bits k; about four a run), so a look-up reads one
 * directory entry and a few neighbouring rows.
 */
export interface GroupRows {
  /** hi, lo, cell of each group, in key order. */
  rows: Uint32Array;
  dir: Uint32Array;
  /** 32 less the directory's bits. */
  dirShift: number;
}

function findCellInRows(g: GroupRows, hi: number, lo: number): number {
  const d = hi >>> g.dirShift;
  const rows = g.rows;
  for (let k = g.dir[d]!, end = g.dir[d + 1]!; k < end; k++) {
    const at = 3 * k;
    if (rows[at] === hi && rows[at + 1] === lo) return rows[at + 2]!;
  }
  throw new Error(`internal: group key ${hi}:${lo} missing from the plan`);
}

/**
 * Caches what every task of one plan shares (the dealing table), and, in group mode, where a
 * bucket's groups are found: their keys and cells, read for that bucket alone.
 */
export interface PreparedPlan {
  plan: GatherPlan;
  table: DealTable;
  /** Group mode: a bucket's groups (GatherPlan.groupStarts), or the whole table (GatherPlan.cellKeyInHeader). */
  groupsOf: ((bucket: number) => BucketGroups | GroupRows) | null;
  cellSecret: Uint32Array;
}

export function preparePlan(plan: GatherPlan, groupsOf: PreparedPlan['groupsOf']): PreparedPlan {
  const table = buildDealTableFromPlan(plan);
  return { plan, table, groupsOf, cellSecret: Uint32Array.from(plan.cellSecret) };
}

function buildDealTableFromPlan(plan: GatherPlan): DealTable {
  // The plan carries the quotas already computed; rebuild the typed views without recomputing.
  const t = buildDealTable([], plan.deal, [], plan.rankSecret ? Uint32Array.from(plan.rankSecret) : null);
  return {
    ...t,
    strataCount: plan.strataCount,
    quota: Float64Array.from(plan.quota),
    cumQuota: Float64Array.from(plan.cumQuota),
    offset: Float64Array.from(plan.offset),
  };
}


function findGroupCell(groups: BucketGroups, hi: number, lo: number): number {
  let a = 0;
  let b = groups.keyHi.length - 1;
  while (a <= b) {
    const m = (a + b) >>> 1;
    const d = groups.keyHi[m]! - hi || groups.keyLo[m]! - lo;
    if (d === 0) return groups.cell[m]!;
    if (d < 0) a = m + 1;
    else b = m - 1;
  }
  throw new Error(`internal: group key ${hi}:${lo} missing from the plan`);
}

/** Bytes appended to a JSON Lines record to add the fold field; inserted before its closing brace. */
function jsonFoldField(name: string, fold: number, empty: boolean): Buffer {
  return Buffer.from(`${empty ? '' : ','}${JSON.stringify(name)}:${fold}`, 'utf8');
}

/**
 * Deals one bucket. `stats`, when given, receives every record's fields under its part (the
 * caller keeps the tables across buckets and merges them at the end).
 */
export function gatherBucket(prep: PreparedPlan, task: GatherTask, stats: TableStats[] | null = null): GatherResult {
  const { plan, table } = prep;
  const K = plan.deal.folds;
  const parts = partCount(plan.deal);
  const strata = plan.strataCount;

  // Load every scatter task's file of this bucket into the front of one ArrayBuffer; the output
  // is laid out behind it, so records move with copyWithin (see BucketWriter for why). With the
  // WebAssembly kernel (gather-kernel.ts) the spill bytes go into its memory instead, and the
  // ArrayBuffer receives the output only.
  const foldCol = plan.foldColumn !== null;
  const isJson = plan.format === 'jsonl';
  const eolLen = plan.lineEnding.length;
  const jsonFoldBase = isJson && foldCol ? Buffer.byteLength(JSON.stringify(plan.foldColumn)) + 2 : 0;
  const foldLen = Int32Array.from({ length: K }, (_, f) => (foldCol ? (isJson ? jsonFoldBase : 1) + String(f).length : 0));
  const t0 = flags.phases ? performance.now() : 0;
  const spillBytes = task.pieces.reduce((a, p) => a + p.length, 0);
  const maxRecords = Math.floor(spillBytes / HEADER_BYTES);
  // Each record sheds a 24-byte header and gains at most its line end and fold field.
  const growth = Math.max(0, 2 + Math.max(0, ...foldLen) - HEADER_BYTES);
  const outCap = spillBytes + maxRecords * growth;
  // JSON Lines with a fold column inserts the field inside the record: JavaScript does that.
  const kernel = isJson && foldCol ? null : gatherKernel();
  // `--order spread`: each part's slice is laid out class by class (a unit is a part and a
  // stratum), so the main thread can keep each class's records apart until the part is put in
  // order (see src/engine/spread-parts.ts). Otherwise a unit is a part.
  const spread = plan.order === 'spread';
  const units = spread ? parts * strata : parts;
  const input = kernel ? kernel.reserve(spillBytes, outCap, maxRecords, units, foldCol ? K : 0) : null;
  // Where the output starts in the arena.
  const base = input ? 0 : spillBytes;
  // allocUnsafeSlow: an ArrayBuffer of its own (transferable) without zero-filling it.
  const need = base + outCap;
  const arena = task.arena && task.arena.byteLength >= need ? task.arena : (Buffer.allocUnsafeSlow(Math.ceil(need * 1.25) + 4096).buffer as ArrayBuffer);
  const bytes = input ?? new Uint8Array(arena, 0, need);
  readPieces(task.pieces, bytes);
  const T = flags.phases ? [t0, performance.now()] : null;
  const ix = indexSpill(bytes, spillBytes, task.pieces, plan.localToGlobal);
  const n = ix.count;
  T?.push(performance.now());
  const { u32, at, keyHi, keyLo } = ix;
  const order = sortByKey(sortKeysOf(ix, bytes, plan.cellKeyInHeader), n, task.shared ?? plan.bits);
  T?.push(performance.now());

  // Each record's cell, in key order (its rank within its stratum follows key order).
  const cellOfRec = scratch(5, n);
  // The hash its cell follows from in hash and group modes: the spill key's, or (records placed
  // individually, see GatherPlan.cellKeyInHeader) the one in the header's identity words.
  const cellHi = plan.cellKeyInHeader ? (i: number): number => u32[at[i]! + 3]! : (i: number): number => keyHi[i]!;
  const cellLo = plan.cellKeyInHeader ? (i: number): number => u32[at[i]! + 2]! : (i: number): number => keyLo[i]!;
  // dealExact counts the ranks on in the task's own array: the task is this bucket's alone.
  if (plan.mode === 'exact') dealExact(order, n, ix.stratum, task.rankStart, table, cellOfRec);
  else if (plan.mode === 'hash') for (let i = 0; i < n; i++) cellOfRec[i] = hashedCell(plan.deal, prep.cellSecret, cellHi(i), cellLo(i));
  else {
    const groups = prep.groupsOf!(task.bucket);
    if ('rows' in groups) for (let i = 0; i < n; i++) cellOfRec[i] = findCellInRows(groups, cellHi(i), cellLo(i));
    else for (let i = 0; i < n; i++) cellOfRec[i] = findGroupCell(groups, cellHi(i), cellLo(i));
  }
  const recSize = scratch(6, n);
  const partBytes = new Float64Array(parts);
  // A table of every (part, fold, stratum) costs more than the bucket's records once it has
  // more entries than half the records, and 1,024 more (1,024 parts, 5 folds and 5,000 strata:
  // 200 MB a bucket to zero, send and add; 8 parts and 5,000 strata: 320 KB a bucket of
  // garbage): then each record's entry is listed, and the list counted.
  const entries = parts * K * strata;
  const dense = entries <= n / 2 + 1024;
  const counts = dense ? new Float64Array(entries) : null;
  const entryOf = dense ? null : scratch64(0, n);
  sizeRecords(ix, cellOfRec, K, strata, eolLen, foldLen, isJson && foldCol ? bytes : null, recSize, partBytes, counts, entryOf);
  T?.push(performance.now());

  // Where each unit's bytes go, and each record's unit (its cell where a unit is a part).
  let unitBytes = partBytes;
  let layoutCell = cellOfRec;
  if (spread) {
    unitBytes = new Float64Array(units);
    layoutCell = scratch(7, n);
    const st = ix.stratum;
    for (let i = 0; i < n; i++) {
      const cell = cellOfRec[i]!;
      const part = (cell / K) | 0;
      const u = part * strata + st[i]!;
      unitBytes[u]! += recSize[i]!;
      layoutCell[i] = u * K + (cell - part * K);
    }
  }
  const partStart = new Float64Array(units + 1);
  partStart[0] = base;
  for (let u = 0; u < units; u++) partStart[u + 1] = partStart[u]! + unitBytes[u]!;

  // Key-order pass: each unit's bytes are written front to back (sequential writes, random
  // reads; measured several times faster than the other way round). The kernel adds each record
  // to its unit's fingerprint while the record is in cache. So does JavaScript's copy without a
  // fold column (8% fewer instructions in stage 2 than a second pass, bench/micro/gather.mjs
  // under valgrind); with one, a second pass in storage order hashes the records as they were read.
  const fps = Array.from({ length: units }, () => new Fingerprint());
  const foldBytes = foldCol
    ? Array.from({ length: K }, (_, f) => (isJson ? jsonFoldField(plan.foldColumn!, f, false) : Buffer.from(String.fromCharCode(plan.delimiter) + String(f), 'latin1')))
    : null;
  if (input) {
    const { at, lenTerm } = ix;
    kernel!.deal({ order, n, cellOfRec: layoutCell, at, lenTerm, partStart, K, crlf: plan.lineEnding === '\r\n', foldBytes }, new Uint8Array(arena), fps);
    T?.push(performance.now());
  } else if (!foldCol) {
    // Positions fit in 31 bits (an arena is far below 2 GiB); small integers keep the loop fast.
    const fill = Int32Array.from(partStart.subarray(0, units));
    copyPlain(ix, order, n, layoutCell, K, fill, recSize, bytes, plan.lineEnding === '\r\n', fps);
    T?.push(performance.now());
  } else {
    const fill = Int32Array.from(partStart.subarray(0, units));
    copyWithFold(ix, order, n, layoutCell, K, fill, recSize, bytes, plan.lineEnding, foldBytes!, isJson);
    T?.push(performance.now());
    fingerprintParts(ix, n, layoutCell, K, fps);
  }
  if (stats) {
    // Each unit's slice of output is plain CSV/TSV or JSON Lines: read it back with the record
    // reader (as the input was read) and add it a batch at a time, column by column.
    const reader = partReader(plan);
    for (let u = 0; u < units; u++) {
      const from = partStart[u]!;
      const to = partStart[u + 1]!;
      if (to === from) continue;
      const batch = reader.parseBlock(Buffer.from(arena, from, to - from), 0, true, 0);
      if (batch) stats[spread ? Math.floor(u / strata) : u]!.addBatch(batch);
    }
  }
  T?.push(performance.now());
  const data = new Uint8Array(arena, base, partStart[units]! - base);
  for (let u = 0; u <= units; u++) partStart[u]! -= base;
  let fingerprints = fps.map((f) => f.toJSON());
  let spreadUnits: GatherResult['spread'];
  if (spread) {
    const perPart = Array.from({ length: parts }, () => new Fingerprint());
    fps.forEach((f, u) => perPart[Math.floor(u / strata)]!.merge(f.toJSON()));
    fingerprints = perPart.map((f) => f.toJSON());
    spreadUnits = unitSizes(order, n, layoutCell, K, recSize, units);
  }
  return {
    bucket: task.bucket,
    data,
    partStart,
    counts: counts ?? countEntries(entryOf!),
    fingerprints,
    ...(spreadUnits ? { spread: spreadUnits } : {}),
    ...(T ? { phases: T.slice(1).map((x, k) => x - T[k]!) } : {}),
  };
}

/** `--order spread`: every record's size in layout order (unit by unit, key order within), and each unit's record count. */
function unitSizes(order: Uint32Array, n: number, layoutCell: Uint32Array, K: number, recSize: Uint32Array, units: number): { sizes: Uint32Array; records: Uint32Array } {
  const records = new Uint32Array(units);
  for (let i = 0; i < n; i++) records[(layoutCell[i]! / K) | 0]!++;
  const next = new Uint32Array(units);
  for (let u = 1; u < units; u++) next[u] = next[u - 1]! + records[u - 1]!;
  const sizes = new Uint32Array(n);
  for (let k = 0; k < n; k++) {
    const i = order[k]!;
    sizes[next[(layoutCell[i]! / K) | 0]!++] = recSize[i]!;
  }
  return { sizes, records };
}

/** Exact dealing: rank within stratum -> dealing position π(rank) -> split block -> position in the split's cycle -> cell. */
function dealExact(order: Uint32Array, n: number, stratum: Uint32Array, seen: Float64Array, table: DealTable, cellOfRec: Uint32Array): void {
  const { partitions: P, folds: K } = table.spec;
  const S = table.spec.splits.length;
  const M = P * K;
  const cycle = new Int32Array(M);
  for (let t = 0; t < M; t++) {
    const c = cellOf(t, P, K);
    cycle[t] = c.partition * K + c.fold;
  }
  const { offset, cumQuota } = table;
  // Ranks in key order, then their positions (one tight loop over the bucket), then cells.
  const pos = scratch64(3, n);
  const strataInOrder = scratch(8, n);
  for (let k = 0; k < n; k++) {
    const s = stratum[order[k]!]!;
    strataInOrder[k] = s;
    pos[k] = seen[s]!;
    seen[s]! += 1;
  }
  const perms = stratumPermutations(table);
  if (perms) permuteRanks(perms, pos, strataInOrder, n);
  for (let k = 0; k < n; k++) {
    const i = order[k]!;
    const s = strataInOrder[k]!;
    const x = pos[k]!;
    let split = 0;
    const base = s * (S + 1);
    while (split < S - 1 && x >= cumQuota[base + split + 1]!) split++;
    const j = offset[s * S + split]! + (x - cumQuota[base + split]!);
    // An integer remainder while j fits 31 bits: a floating-point one cost ~16 ns a record
    // against ~7 in a loop of this step over 1 Mi records.
    cellOfRec[i] = split * M + cycle[j < 0x80000000 ? (j | 0) % M : j % M]!;
  }
}

/** Output size of every record, bytes per part, and counts per (part, fold, stratum). */
function sizeRecords(
  ix: BucketIndex,
  cellOfRec: Uint32Array,
  K: number,
  strata: number,
  eolLen: number,
  foldLen: Int32Array,
  jsonBytes: Uint8Array | null,
  recSize: Uint32Array,
  partBytes: Float64Array,
  counts: Float64Array | null,
  entryOf: Float64Array | null,
): void {
  const { lenTerm, stratum, at } = ix;
  for (let i = 0; i < ix.count; i++) {
    const cell = cellOfRec[i]!;
    const part = (cell / K) | 0;
    const lt = lenTerm[i]!;
    const term = lt & 3;
    let size = (lt >>> 2) + (term === 0 ? eolLen : term) + foldLen[cell - part * K]!;
    // An empty JSON object takes the fold field without a comma.
    if (jsonBytes && isEmptyObject(jsonBytes, at[i]! * 4 + HEADER_BYTES, lt >>> 2)) size--;
    recSize[i] = size;
    partBytes[part]! += size;
    if (counts) counts[cell * strata + stratum[i]!]!++;
    else entryOf![i] = cell * strata + stratum[i]!;
  }
}

/** The entries listed once per record, counted: each distinct entry and how often it occurs. */
function countEntries(entryOf: Float64Array): SparseCounts {
  // Open addressing over at most twice as many slots as records: one pass, no sort.
  let bits = 4;
  while (2 ** bits < 2 * entryOf.length) bits++;
  const size = 2 ** bits;
  const mask = size - 1;
  const shift = 32 - bits;
  const keys = scratch64(1, size).fill(-1);
  const hits = scratch64(2, size).fill(0);
  let distinct = 0;
  for (let i = 0; i < entryOf.length; i++) {
    const e = entryOf[i]!;
    // Fibonacci hashing: the product's top bits depend on all of the entry's bits.
    let slot = (Math.imul((e % 4294967296) ^ Math.imul((e / 4294967296) | 0, 0x85ebca77), 0x9e3779b1) >>> shift) & mask;
    while (keys[slot] !== e && keys[slot] !== -1) slot = (slot + 1) & mask;
    if (keys[slot] === -1) {
      keys[slot] = e;
      distinct++;
    }
    hits[slot]!++;
  }
  const index = new Float64Array(distinct);
  const value = new Float64Array(distinct);
  let j = 0;
  for (let slot = 0; slot < size; slot++) {
    if (keys[slot] === -1) continue;
    index[j] = keys[slot]!;
    value[j++] = hits[slot]!;
  }
  return { index, value };
}

/** The common case: copy each record and its line end, nothing added; fingerprint it on the way. */
function copyPlain(ix: BucketIndex, order: Uint32Array, n: number, cellOfRec: Uint32Array, K: number, fill: Int32Array, recSize: Uint32Array, bytes: Uint8Array, crlfDefault: boolean, fps: Fingerprint[]): void {
  const { u32, at, lenTerm } = ix;
  for (let k = 0; k < n; k++) {
    const i = order[k]!;
    const part = (cellOfRec[i]! / K) | 0;
    const pos = fill[part]!;
    fill[part] = pos + recSize[i]!;
    const lt = lenTerm[i]!;
    const len = lt >>> 2;
    const w0 = at[i]! + HEADER_WORDS;
    const cs = w0 * 4;
    bytes.copyWithin(pos, cs, cs + len);
    const term = lt & 3;
    if (term === 1 || (term === 0 && !crlfDefault)) bytes[pos + len] = 0x0a;
    else {
      bytes[pos + len] = 0x0d;
      bytes[pos + len + 1] = 0x0a;
    }
    fps[part]!.addAligned(u32, w0, len);
  }
}

/** Records with the fold column (CSV/TSV) or fold field (JSON Lines) added. */
function copyWithFold(
  ix: BucketIndex,
  order: Uint32Array,
  n: number,
  cellOfRec: Uint32Array,
  K: number,
  fill: Int32Array,
  recSize: Uint32Array,
  bytes: Uint8Array,
  lineEnding: string,
  foldBytes: Buffer[],
  isJson: boolean,
): void {
  const { at, lenTerm } = ix;
  const eol = Buffer.from(lineEnding, 'latin1');
  for (let k = 0; k < n; k++) {
    const i = order[k]!;
    const cell = cellOfRec[i]!;
    const part = (cell / K) | 0;
    let pos = fill[part]!;
    fill[part] = pos + recSize[i]!;
    const lt = lenTerm[i]!;
    const len = lt >>> 2;
    const term = lt & 3;
    const cs = at[i]! * 4 + HEADER_BYTES;
    const fb = foldBytes[cell - part * K]!;
    if (isJson) {
      // Insert the fold field before the record's closing brace (trailing spaces stay after it).
      let close = cs + len - 1;
      while (close > cs && bytes[close] !== 0x7d) close--;
      let prev = close - 1;
      while (prev > cs && (bytes[prev] === 0x20 || bytes[prev] === 0x09)) prev--;
      bytes.copyWithin(pos, cs, close);
      pos += close - cs;
      // An empty object takes the field without its leading comma.
      for (let b = bytes[prev] === 0x7b ? 1 : 0; b < fb.length; b++) bytes[pos++] = fb[b]!;
      bytes.copyWithin(pos, close, cs + len);
      pos += cs + len - close;
    } else {
      bytes.copyWithin(pos, cs, cs + len);
      pos += len;
      for (let b = 0; b < fb.length; b++) bytes[pos++] = fb[b]!;
    }
    if (term === 1) bytes[pos] = 0x0a;
    else if (term === 2) {
      bytes[pos] = 0x0d;
      bytes[pos + 1] = 0x0a;
    } else for (let b = 0; b < eol.length; b++) bytes[pos + b] = eol[b]!;
  }
}

/** Per-part fingerprints of the record contents (storage order: the sum does not care). */
function fingerprintParts(ix: BucketIndex, n: number, cellOfRec: Uint32Array, K: number, fps: Fingerprint[]): void {
  const { u32, at, lenTerm } = ix;
  for (let i = 0; i < n; i++) fps[(cellOfRec[i]! / K) | 0]!.addAligned(u32, at[i]! + HEADER_WORDS, lenTerm[i]! >>> 2);
}

/** True when the JSON record in bytes [s, s+len) is `{}` (with optional blanks). */
function isEmptyObject(bytes: Uint8Array, s: number, len: number): boolean {
  let close = s + len - 1;
  while (close > s && bytes[close] !== 0x7d) close--;
  let prev = close - 1;
  while (prev > s && (bytes[prev] === 0x20 || bytes[prev] === 0x09)) prev--;
  return bytes[prev] === 0x7b;
}
