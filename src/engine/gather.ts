/**
 * Stage 2 for one bucket: load its spill files, sort the records by key, deal each one to its
 * cell from its stratum rank, and lay out each part's slice of output bytes. Pure apart from
 * reading the spill files, so a worker thread, a process or another machine can run it.
 */
import { readFileSync } from 'node:fs';
import { buildDealTable, dealRecord, type DealTable } from '../core/deal.js';
import { Fingerprint, hashToUnit, hashWords3 } from '../core/hash.js';
import { sortByKey } from '../core/sort.js';
import { ioError } from '../errors.js';
import { partCount, type GatherPlan } from './plan.js';
import { HEADER_BYTES, viewBucket } from './spill.js';

export interface GatherTask {
  bucket: number;
  /** The bucket's spill file from each scatter task, in task order. */
  paths: string[];
  /** Rank, within each dealing stratum, of the first record of that stratum in this bucket. */
  rankStart: Float64Array;
}

export interface GatherResult {
  bucket: number;
  /** All parts' output bytes for this bucket, part after part. */
  data: Uint8Array;
  /** `partStart[p]`..`partStart[p+1]`: part p's bytes within `data`. */
  partStart: Float64Array;
  /** `counts[(part * K + fold) * strata + s]`: records written per part, fold and stratum. */
  counts: Float64Array;
  /** Order-independent fingerprint per part of the record contents written (fold column excluded). */
  fingerprints: { hi: number; lo: number; count: number }[];
}

export interface GroupTable {
  keyHi: Uint32Array;
  keyLo: Uint32Array;
  cell: Uint32Array;
}

/** Caches what every task of one plan shares (the dealing table, the group table). */
export interface PreparedPlan {
  plan: GatherPlan;
  table: DealTable;
  groups: GroupTable | null;
  cellSecret: Uint32Array;
}

export function preparePlan(plan: GatherPlan, groups: GroupTable | null): PreparedPlan {
  const table = buildDealTableFromPlan(plan);
  return { plan, table, groups, cellSecret: Uint32Array.from(plan.cellSecret) };
}

function buildDealTableFromPlan(plan: GatherPlan): DealTable {
  // The plan carries the quotas already computed; rebuild the typed views without recomputing.
  const t = buildDealTable([], plan.deal);
  return {
    ...t,
    strataCount: plan.strataCount,
    quota: Float64Array.from(plan.quota),
    cumQuota: Float64Array.from(plan.cumQuota),
    offset: Float64Array.from(plan.offset),
  };
}

/** Cell id for hash mode: a pure function of the record's key and the seed. */
export function hashCell(prep: PreparedPlan, keyHi: number, keyLo: number): number {
  const { splits, partitions: P, folds: K } = prep.plan.deal;
  const h = hashWords3(prep.cellSecret, keyHi, keyLo, 0x63656c6c);
  const u = hashToUnit(h[0]!, h[1]!);
  const wsum = splits.reduce((a, b) => a + b.weight, 0);
  let acc = 0;
  let split = splits.length - 1;
  let lo = 0;
  let hi = 1;
  for (let i = 0; i < splits.length; i++) {
    const next = acc + splits[i]!.weight / wsum;
    if (u < next || i === splits.length - 1) {
      split = i;
      lo = acc;
      hi = next;
      break;
    }
    acc = next;
  }
  const v = Math.min(0.9999999999999999, (u - lo) / (hi - lo));
  const t = Math.floor(v * P * K);
  return (split * P + (t % P)) * K + Math.floor(t / P);
}

function findGroupCell(groups: GroupTable, hi: number, lo: number): number {
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

const COMMA_FOLD = (delim: number, fold: number): Buffer => Buffer.from(String.fromCharCode(delim) + String(fold), 'latin1');

/** Bytes appended to a JSON Lines record to add the fold field; inserted before its closing brace. */
function jsonFoldField(name: string, fold: number, empty: boolean): Buffer {
  return Buffer.from(`${empty ? '' : ','}${JSON.stringify(name)}:${fold}`, 'utf8');
}

export function gatherBucket(prep: PreparedPlan, task: GatherTask): GatherResult {
  const { plan, table } = prep;
  const K = plan.deal.folds;
  const parts = partCount(plan.deal);
  const strata = plan.strataCount;

  // Load every scatter task's file of this bucket into one buffer.
  const pieces: Buffer[] = [];
  for (const p of task.paths) {
    try {
      pieces.push(readFileSync(p));
    } catch (err) {
      throw ioError(err, p, 'reading a spill file');
    }
  }
  const buf = pieces.length === 1 ? pieces[0]! : Buffer.concat(pieces);
  const view = viewBucket(buf);
  const n = view.count;
  const { u32, at } = view;

  // Which scatter task each record came from (for its local stratum ids).
  const taskOf = new Uint16Array(n);
  {
    let i = 0;
    let wordEnd = 0;
    for (let t = 0; t < pieces.length; t++) {
      wordEnd += pieces[t]!.byteLength >>> 2;
      while (i < n && at[i]! < wordEnd) taskOf[i++] = t;
    }
  }

  const keyHi = new Uint32Array(n);
  const keyLo = new Uint32Array(n);
  const input = new Uint32Array(n);
  const offset = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    const w = at[i]!;
    keyHi[i] = u32[w]!;
    keyLo[i] = u32[w + 1]!;
    input[i] = u32[w + 3]! & 0xffff;
    offset[i] = (u32[w + 3]! >>> 16) * 0x100000000 + u32[w + 2]!;
  }
  const order = sortByKey({ keyHi, keyLo, input, offset }, n, plan.bits);

  // Deal: cell of every record, in key order.
  const seen = new Float64Array(strata);
  const cellOfRec = new Uint32Array(n);
  const stratumOfRec = new Uint32Array(n);
  const partBytes = new Float64Array(parts);
  const foldCol = plan.foldColumn !== null;
  const isJson = plan.format === 'jsonl';
  const eolLen = plan.lineEnding.length;
  const jsonFoldBase = isJson && foldCol ? Buffer.byteLength(JSON.stringify(plan.foldColumn)) + 2 : 0;
  for (let k = 0; k < n; k++) {
    const i = order[k]!;
    const w = at[i]!;
    const s = plan.localToGlobal[taskOf[i]!]![u32[w + 4]!]!;
    stratumOfRec[i] = s;
    let cell: number;
    if (plan.mode === 'exact') {
      cell = dealRecord(table, s, task.rankStart[s]! + seen[s]!);
      seen[s]!++;
    } else if (plan.mode === 'hash') {
      cell = hashCell(prep, keyHi[i]!, keyLo[i]!);
    } else {
      cell = findGroupCell(prep.groups!, keyHi[i]!, keyLo[i]!);
    }
    cellOfRec[i] = cell;
    const lt = u32[w + 5]!;
    const len = lt >>> 2;
    const term = lt & 3;
    let size = len + (term === 0 ? eolLen : term);
    if (foldCol) size += (isJson ? jsonFoldBase : 1) + String(cell % K).length;
    partBytes[Math.floor(cell / K)]! += size;
  }

  const partStart = new Float64Array(parts + 1);
  for (let p = 0; p < parts; p++) partStart[p + 1] = partStart[p]! + partBytes[p]!;
  // Its own ArrayBuffer (not the shared small-buffer pool), so it can be transferred.
  const out = Buffer.allocUnsafeSlow(partStart[parts]!);
  const fill = Float64Array.from(partStart.subarray(0, parts));
  const counts = new Float64Array(parts * K * strata);
  const fps = Array.from({ length: parts }, () => new Fingerprint());
  const eol = Buffer.from(plan.lineEnding, 'latin1');
  const foldBytes = foldCol && !isJson ? Array.from({ length: K }, (_, f) => COMMA_FOLD(plan.delimiter, f)) : [];

  for (let k = 0; k < n; k++) {
    const i = order[k]!;
    const w = at[i]!;
    const lt = u32[w + 5]!;
    const len = lt >>> 2;
    const term = lt & 3;
    const cs = w * 4 + HEADER_BYTES;
    const cell = cellOfRec[i]!;
    const part = Math.floor(cell / K);
    const fold = cell % K;
    let pos = fill[part]!;
    fps[part]!.addBytes(buf, cs, cs + len);
    if (foldCol && isJson) {
      // Insert the fold field before the record's closing brace (trailing spaces stay after it).
      let close = cs + len - 1;
      while (close > cs && buf[close] !== 0x7d) close--;
      let prev = close - 1;
      while (prev > cs && (buf[prev] === 0x20 || buf[prev] === 0x09)) prev--;
      const extra = jsonFoldField(plan.foldColumn!, fold, buf[prev] === 0x7b);
      pos += buf.copy(out, pos, cs, close);
      pos += extra.copy(out, pos);
      pos += buf.copy(out, pos, close, cs + len);
    } else {
      pos += buf.copy(out, pos, cs, cs + len);
      if (foldCol) pos += foldBytes[fold]!.copy(out, pos);
    }
    if (term === 0) pos += eol.copy(out, pos);
    else if (term === 1) out[pos++] = 0x0a;
    else {
      out[pos++] = 0x0d;
      out[pos++] = 0x0a;
    }
    fill[part] = pos;
    counts[(part * K + fold) * strata + stratumOfRec[i]!]!++;
  }
  // JSON fold fields were sized generously; close the gaps so each part's bytes are contiguous.
  let data: Uint8Array = out;
  if (foldCol && isJson) {
    let dst = 0;
    for (let p = 0; p < parts; p++) {
      const a = partStart[p]!;
      const b = fill[p]!;
      out.copy(out, dst, a, b);
      partStart[p] = dst;
      dst += b - a;
    }
    partStart[parts] = dst;
    data = out.subarray(0, dst);
  }
  return { bucket: task.bucket, data, partStart, counts, fingerprints: fps.map((f) => f.toJSON()) };
}
