/**
 * Worker entry for stage 2. One task = one bucket.
 *
 *   main thread                         worker thread (this file)
 *   ───────────                         ─────────────────────────
 *   plan.json written to spill dir ──▶  loaded once per plan path, cached
 *   { planPath, bucket, paths,    ──▶  read spill files, sort, deal
 *     rankStart }                       lay out each part's bytes
 *   ordered writer (bucket order) ◀──  { data (transferred), partStart, counts, fingerprints }
 *
 * Errors cross the thread boundary as plain data (`toWire`) because structured clone drops the
 * error class and its code; the main thread rebuilds them.
 */
import { readFileSync } from 'node:fs';
import { move, transferableSymbol, valueSymbol } from 'piscina';
import { gatherBucket, preparePlan, type GatherResult, type GroupTable, type PreparedPlan } from '../engine/gather.js';
import type { GatherPlan } from '../engine/plan.js';
import { toWire, type WireError } from '../errors.js';
import { join, dirname } from 'node:path';

export interface WorkerTask {
  planPath: string;
  bucket: number;
  paths: string[];
  rankStart: Float64Array;
  arena?: ArrayBuffer;
}

export type WorkerReply = { ok: true; result: GatherResult } | { ok: false; error: WireError };

let cachedPath = '';
let cached: PreparedPlan | null = null;

export function loadPlan(planPath: string): PreparedPlan {
  if (cached && cachedPath === planPath) return cached;
  const plan = JSON.parse(readFileSync(planPath, 'utf8')) as GatherPlan;
  let groups: GroupTable | null = null;
  if (plan.groupsFile) {
    const raw = readFileSync(join(dirname(planPath), plan.groupsFile));
    const buf = new Uint8Array(raw).buffer;
    const n = raw.byteLength / 12;
    groups = {
      keyHi: new Uint32Array(buf, 0, n),
      keyLo: new Uint32Array(buf, n * 4, n),
      cell: new Uint32Array(buf, n * 8, n),
    };
  }
  cached = preparePlan(plan, groups);
  cachedPath = planPath;
  return cached;
}

export default function runGatherTask(task: WorkerTask): WorkerReply | object {
  try {
    const prep = loadPlan(task.planPath);
    const result = gatherBucket(prep, task);
    const reply: WorkerReply = { ok: true, result };
    // Hand the output bytes over without copying them.
    return move({ [transferableSymbol]: [result.data.buffer], [valueSymbol]: reply } as unknown as ArrayBuffer);
  } catch (err) {
    return { ok: false, error: toWire(err) };
  }
}
