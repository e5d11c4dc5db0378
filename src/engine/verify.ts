/**
 * `verify()`: re-reads an output folder and checks every file against its manifest, and
 * optionally the inputs against both. Nothing is trusted from the run itself: sizes, sha256,
 * record counts, class and fold counts and fingerprints are all recomputed from the bytes on
 * disk, with the same record reader the shuffle used (so a record is the same byte range).
 *
 * A failed check is a result, not an error: the report lists it and `ok` is false. Only a
 * folder that cannot be checked at all (no manifest, or one that is not a manifest) throws.
 * Memory stays bounded: files are streamed; the optional record-by-record difference listing
 * keeps one 64-bit hash per record and is done only up to DIFF_RECORD_LIMIT records.
 *
 * The steps live in src/engine/verify/: the manifest read and checked (manifest-shape.ts) and
 * made into a ReadPlan (read-plan.ts); every part read (scan-parts.ts, part-scan.ts,
 * records.ts); the checks that need no inputs (checks.ts); with --against, the inputs
 * (against.ts) and the seed replayed (replay-check.ts). Each returns its Findings (report.ts).
 */
import { resolveVerifyOptions, type PartOrder, type VerifyOptions, type VerifyProgress } from '../options.js';
import { checkAgainst, type AgainstResult } from './verify/against.js';
import { checkBalance, checkParts, checkRejects, checkTotals, checkUnlisted, summarizeOutput } from './verify/checks.js';
import { loadManifest } from './verify/manifest-shape.js';
import { createReadPlan } from './verify/read-plan.js';
import { DIFF_RECORD_LIMIT, HashList } from './verify/records.js';
import { checkReplay } from './verify/replay-check.js';
import { Findings, type VerifyReport } from './verify/report.js';
import { scanParts } from './verify/scan-parts.js';

export type { VerifyOptions, VerifyProgress } from '../options.js';
export type { RecordDifference, VerifyAgainst, VerifyCheck, VerifyMismatch, VerifyReport, VerifyStatus } from './verify/report.js';
export { loadManifest } from './verify/manifest-shape.js';
export { DIFF_RECORD_LIMIT } from './verify/records.js';
export { DIFF_LIST_LIMIT } from './verify/against.js';

export async function verify(given: VerifyOptions): Promise<VerifyReport> {
  const options = resolveVerifyOptions(given);
  const t0 = Date.now();
  const progress = (e: Omit<VerifyProgress, 'elapsedMs'>): void => options.onProgress?.({ ...e, elapsedMs: Date.now() - t0 });
  const dir = options.dir;
  const m = loadManifest(dir);
  const plan = createReadPlan(m);

  // Every output record's hash, where --against may have differences to list.
  const listable = options.against !== undefined && m.output.records <= DIFF_RECORD_LIMIT && m.input.records <= DIFF_RECORD_LIMIT;
  const outHashes = listable ? new HashList() : null;
  const parts = m.output.parts;
  let partsDone = 0;
  let recordsSeen = 0;
  const read = await scanParts(dir, m, plan, options.threads, outHashes, (s) => {
    partsDone++;
    recordsSeen += s.records;
    progress({ stage: 'parts', done: partsDone, total: parts.length, records: recordsSeen });
  });
  const output = summarizeOutput(read.scans);

  const found = new Findings();
  found.add(checkParts(m, plan, read.scans));
  found.add(checkUnlisted(dir, m));
  found.add(await checkRejects(dir, m));
  found.add(checkTotals(m, plan, read, output));
  found.add(checkBalance(m, plan, read.scans, output));

  let against: AgainstResult | null = null;
  let replay: VerifyReport['replay'] = null;
  if (options.against !== undefined) {
    against = await checkAgainst(options.against, dir, m, plan, output, outHashes, progress);
    found.add(against.findings);
    const replayed = await checkReplay(options.against, dir, m, read.scans, against.misordered, options, progress);
    found.add(replayed.findings);
    replay = replayed.replay;
  }

  return {
    ok: found.mismatches.length === 0,
    dir,
    manifestVersion: m.manifestVersion,
    dealingScheme: m.dealingScheme ?? 1,
    order: m.dealingScheme === undefined ? 'interleaved' : (m.options as { order: PartOrder }).order,
    records: m.output.records,
    parts: parts.length,
    checks: found.checks,
    mismatches: found.mismatches,
    against: against?.against ?? null,
    replay,
  };
}
