/**
 * Every part read (see part-scan.ts): on worker threads (src/workers/verify-worker.ts) for large
 * outputs, else on the calling thread, two parts at a time either way per thread. What a worker
 * sends back is plain data; it is turned back into a PartScan here.
 */
import { availableParallelism } from 'node:os';
import { join } from 'node:path';
import pLimit from 'p-limit';
import { Fingerprint } from '../../core/hash.js';
import { TableStats, type SerializedStats } from '../../core/stats.js';
import { WorkerLanes } from '../../workers/lanes.js';
import { resolveWorkerFile } from '../../workers/worker-file.js';
import type { Manifest } from '../manifest.js';
import { PartStatsGather } from '../part-stats.js';
import { scanPart, type PartScan } from './part-scan.js';
import { createReadPlan, type ReadPlan } from './read-plan.js';
import { HashList } from './records.js';

/** Outputs at least this large are read on worker threads by default. */
const PARALLEL_MIN_BYTES = 32 * 1024 * 1024;

/** One part for a verify worker (the worker has the manifest). */
export interface VerifyPartTask {
  kind: 'part';
  path: string;
  display: string;
  /** Collect every record's hash (for listing differences). */
  hashes: boolean;
}

/** A PartScan as it crosses from a worker: plain data and typed arrays. */
export interface SerializedPartScan extends Omit<PartScan, 'unknown' | 'fingerprint'> {
  unknown: [string, { count: number; line: number }][];
  fingerprint: { hi: number; lo: number; count: number };
  /** (lo, hi) pairs, or null; `hashesOverflow` when there were too many to keep. */
  hashes: Uint32Array | null;
  hashesOverflow: boolean;
}

/** The statistics of the parts a thread reads, where the manifest holds column statistics (a run with --stats). */
export function partStatsGatherFor(m: Manifest): PartStatsGather | null {
  return m.input.stats !== undefined ? new PartStatsGather(m.input.columns) : null;
}

/** The worker's side: scans one part with the plan made from the manifest. */
export async function scanPartTask(m: Manifest, task: VerifyPartTask, gather: PartStatsGather | null): Promise<SerializedPartScan> {
  const hashes = task.hashes ? new HashList() : null;
  const s = await scanPart(task.path, task.display, createReadPlan(m), hashes, gather, m.output.parts.find((p) => p.path === task.display)?.strata ?? null);
  return {
    ...s,
    unknown: [...s.unknown],
    fingerprint: s.fingerprint.toJSON(),
    hashes: hashes && !hashes.overflow ? hashes.words.slice(0, 2 * hashes.count) : null,
    hashesOverflow: hashes?.overflow ?? false,
  };
}

/** The main thread's side: a worker's scan back as a PartScan, its hashes added to `hashes`. */
function readPartScan(r: SerializedPartScan, hashes: HashList | null): PartScan {
  const fingerprint = new Fingerprint();
  fingerprint.merge(r.fingerprint);
  if (hashes) {
    if (r.hashesOverflow) hashes.overflow = true;
    const w = r.hashes;
    if (w) for (let i = 0; i < w.length; i += 2) hashes.add(w[i + 1]!, w[i]!);
  }
  const { hashes: _h, hashesOverflow: _o, ...rest } = r;
  return { ...rest, unknown: new Map(r.unknown), fingerprint };
}

/** The parts as read, in the manifest's order, and with --stats the parts' statistics merged (the whole input's). */
export interface PartsRead {
  scans: PartScan[];
  wholeStats: TableStats | null;
}

/**
 * Reads every part the manifest lists. `threads` as the caller gave it (undefined: worker
 * threads for outputs of PARALLEL_MIN_BYTES and more); `hashes` collects every record's hash;
 * `onPart` is called as each part is done.
 */
export async function scanParts(dir: string, m: Manifest, plan: ReadPlan, given: number | undefined, hashes: HashList | null, onPart: (s: PartScan) => void): Promise<PartsRead> {
  const parts = m.output.parts;
  const partDone = (s: PartScan): PartScan => {
    onPart(s);
    return s;
  };
  // 0: the calling thread reads every part (as in shuffle and profile).
  const threads = Math.min(parts.length, given ?? (parts.reduce((a, p) => a + p.bytes, 0) >= PARALLEL_MIN_BYTES ? availableParallelism() : 0));
  let scans: PartScan[];
  // With --stats: the parts' statistics merged, for the whole input's.
  let wholeStats: TableStats | null = null;
  if (threads > 0) {
    // Each part on a worker thread (src/workers/verify-worker.ts), the least busy one first; two
    // a thread at a time. (A thread starts every task it is sent at once: with all of 2,000 parts
    // sent, each thread read a thousand at a time, 760 MiB at the peak against 110 on one thread.)
    const lanes = new WorkerLanes<VerifyPartTask, SerializedStats | null>(resolveWorkerFile('verify-worker.js'), threads, m);
    // Two parts a thread keep its reads going; one where each holds a table of every column.
    const limit = pLimit(plan.statsColumns !== null ? threads : 2 * threads);
    try {
      scans = await Promise.all(
        parts.map((p) => limit(async () => partDone(readPartScan(await lanes.run({ kind: 'part', path: join(dir, p.path), display: p.path, hashes: hashes !== null }), hashes)))),
      );
      // Each thread's statistics of the parts it read (see PartStatsGather).
      if (plan.statsColumns !== null) {
        wholeStats = new TableStats(plan.statsColumns);
        for (const t of await lanes.finish()) if (t) wholeStats.mergeSerialized(t);
      }
    } finally {
      await lanes.destroy();
    }
  } else {
    const limit = pLimit(2);
    const gather = partStatsGatherFor(m);
    scans = await Promise.all(parts.map((p) => limit(async () => partDone(await scanPart(join(dir, p.path), p.path, plan, hashes, gather, p.strata)))));
    if (gather) wholeStats = gather.whole;
  }

  return { scans, wholeStats };
}
