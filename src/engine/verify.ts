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
 */
import { createHash } from 'node:crypto';
import { closeSync, createReadStream, openSync, readdirSync, readFileSync, statSync, type Dirent } from 'node:fs';
import { isAbsolute, join, normalize } from 'node:path';
import { Readable } from 'node:stream';
import { availableParallelism } from 'node:os';
import pLimit from 'p-limit';
import { withinTolerance, balanceOfUnits } from '../core/balance.js';
import { Fingerprint } from '../core/hash.js';
import { TableStats, type ColumnSummary, type SerializedStats } from '../core/stats.js';
import { PartStatsGather } from './part-stats.js';
import { RowdeckError, ioError } from '../errors.js';
import { describeSystemError } from '../io/os-errors.js';
import type { InputFormat, RecordBatch } from '../io/batch.js';
import { ByteIdTable } from '../core/byte-table.js';
import { isStreamInput, nameInput, openInput, READ_AHEAD_MAX_BYTES, ReadAhead } from '../io/input.js';
import { RecordReader } from '../io/reader.js';
import { MANIFEST_VERSION, type Manifest, type PartRecord } from './manifest.js';
import { DEALING_SCHEME } from '../core/deal.js';
import { SpreadCheck } from '../core/spread.js';
import { resolveVerifyOptions, type PartOrder, type VerifyOptions } from '../options.js';
import { misorderedInputs } from './input-order.js';
import { describeStratum, describeValues, keyBytes, keyOfValues, stratumKey, stratumValues, tupleKey, type KeyColumn, type KeyRange } from '../core/strata.js';
import { resolveWorkerFile } from '../workers/worker-file.js';
import { compareReplay, environmentFault, replayable, replayShuffle } from './replay.js';
import { WorkerLanes } from '../workers/lanes.js';

/** Above this many records (input or output), a failed --against check reports counts and fingerprints only. */
export const DIFF_RECORD_LIMIT = 2_000_000;
/** Records listed per kind (missing, extra) when the input and the output differ. */
export const DIFF_LIST_LIMIT = 20;
/** Distinct differing records remembered for the listing (the counts are always complete). */
const DIFF_TRACK_LIMIT = 10_000;
/** Record text in the listing is cut to this many characters. */
const RECORD_TEXT_LIMIT = 200;

export type VerifyStatus = 'passed' | 'failed' | 'skipped';

export interface VerifyCheck {
  /** Output file (relative to the folder), `manifest.json`, or an input path. */
  file: string;
  /** What was checked: `present`, `bytes`, `sha256`, `readable`, `header`, `records`, `strata`, `folds`, `fold values`, `fold strata`, `fingerprint`, `balance`, … */
  check: string;
  status: VerifyStatus;
  /** Why a check was skipped, or what it was computed from. */
  note?: string;
}

export interface VerifyMismatch {
  file: string;
  check: string;
  /** Which entry of a per-class or per-fold check, e.g. `fault="drift"` or `fold 3`. */
  item?: string;
  /** Physical line (1-based) of the first record concerned, where there is one. */
  line?: number;
  expected: string | number;
  found: string | number;
}

/** One record that is in the inputs but not in the output, or the other way round. */
export interface RecordDifference {
  kind: 'missing' | 'extra';
  /** Input path (missing) or output part (extra). */
  file: string;
  line: number;
  /** The record's text without its line end and without the fold column (cut to 200 characters). */
  record: string;
  /** Copies of this exact record in the inputs and in the output. */
  copies: { input: number; output: number };
}

export interface VerifyAgainst {
  inputs: string[];
  records: number;
  rejected: number;
  fingerprint: string;
  /** null when the inputs and the output hold the same records. */
  differences: {
    /** Records in the inputs but not in the output, counting copies. */
    missing: number;
    extra: number;
    listed: RecordDifference[];
    /** `listed`: every difference or the first 20 of each kind are listed; `counts only`: too many records to list them. */
    listing: 'listed' | 'counts only';
  } | null;
}

export interface VerifyReport {
  ok: boolean;
  /** The folder checked, as given. */
  dir: string;
  manifestVersion: number;
  /** Which dealing scheme wrote the output (1 for manifests of version 1: see Manifest.dealingScheme). */
  dealingScheme: number;
  /** The order inside the parts the manifest promises (manifests of version 1: "interleaved", scheme 1's). */
  order: PartOrder | 'interleaved';
  records: number;
  parts: number;
  checks: VerifyCheck[];
  mismatches: VerifyMismatch[];
  against: VerifyAgainst | null;
  /**
   * With `against`: the shuffle run again from the manifest's seed and options. `passed`: the
   * parts are exactly what that seed gives; `failed`: they (or the manifest) are not, mismatches
   * under the check `replay`; `skipped`: see `note`. null without `against`.
   */
  replay: { status: VerifyStatus; seed: string | null; note: string } | null;
}

export type { VerifyOptions, VerifyProgress } from '../options.js';

/** How to read the parts and inputs, and how to recognise each record's class, from the manifest. */
interface ReadPlan {
  format: InputFormat;
  delimiter: string | undefined;
  delimiterByte: number;
  header: boolean;
  columns: string[];
  stratify: string[];
  /** Per stratify column: quantile bin edges, or null for plain values. */
  bins: (number[] | null)[];
  /** Canonical stratum key -> index in `strata.values`; null when the values were left out. */
  strataIndex: Map<string, number> | null;
  strataCount: number;
  strataLabels: string[];
  folds: number;
  foldColumn: string | null;
  /** The columns whose statistics the manifest holds (a run with --stats), or null. */
  statsColumns: string[] | null;
  /** Whether those statistics were written without data values. */
  excludeValues: boolean;
  /** The order the manifest promises inside each part ("interleaved": dealing scheme 1's, not checked). */
  order: PartOrder | 'interleaved';
  /** `grouped`: the columns whose values make a group (the group column, or the key columns). */
  groupColumns: string[];
}

interface PartScan {
  present: boolean;
  bytes: number;
  sha256: string;
  readError: string | null;
  /** Column names the part's header gives (CSV/TSV), or null. */
  columns: string[] | null;
  records: number;
  strata: Float64Array;
  folds: Float64Array;
  /** `foldStrata[fold * strataCount + s]`. */
  foldStrata: Float64Array;
  /** Records whose class is not among the manifest's, by display label. */
  unknown: Map<string, { count: number; line: number }>;
  badFold: { count: number; line: number; text: string } | null;
  fingerprint: Fingerprint;
  /** With statsColumns: the part's column statistics as the manifest gives them (its table went to a PartStatsGather). */
  stats: ColumnSummary[] | null;
  /** The first place the part breaks the promised order (spread or grouped), or null. */
  orderBreak: { line: number; expected: string; found: string } | null;
}

/** Outputs at least this large are read on worker threads by default. */
const PARALLEL_MIN_BYTES = 32 * 1024 * 1024;

/** One part for a verify worker (the worker has the manifest). */
export interface VerifyPartTask {
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

/** 64-bit record hashes, stored as pairs of 32-bit words (lo, hi) so they can be sorted as BigUint64. */
class HashList {
  words = new Uint32Array(2 * 1024);
  count = 0;
  overflow = false;

  add(hi: number, lo: number): void {
    if (this.overflow) return;
    if (this.count >= DIFF_RECORD_LIMIT) {
      this.overflow = true;
      this.words = new Uint32Array(0);
      return;
    }
    if (2 * this.count === this.words.length) {
      const bigger = new Uint32Array(Math.min(2 * DIFF_RECORD_LIMIT, this.words.length * 2));
      bigger.set(this.words);
      this.words = bigger;
    }
    this.words[2 * this.count] = lo;
    this.words[2 * this.count + 1] = hi;
    this.count++;
  }

  /** Sorted in place; equal hashes end up next to each other, whatever the byte order. */
  sorted(): { big: BigUint64Array; words: Uint32Array } {
    const big = new BigUint64Array(this.words.buffer, 0, this.count);
    big.sort();
    return { big, words: this.words };
  }
}

const hashKey = (hi: number, lo: number): string => `${hi}:${lo}`;

export async function verify(given: VerifyOptions): Promise<VerifyReport> {
  const options = resolveVerifyOptions(given);
  const t0 = Date.now();
  const dir = options.dir;
  const m = loadManifest(dir);
  const plan = createReadPlan(m);
  const checks: VerifyCheck[] = [];
  const mismatches: VerifyMismatch[] = [];
  const pass = (file: string, check: string, note?: string): void => {
    checks.push(note === undefined ? { file, check, status: 'passed' } : { file, check, status: 'passed', note });
  };
  const skip = (file: string, check: string, note: string): void => {
    checks.push({ file, check, status: 'skipped', note });
  };
  /** Records one check: passed when `bad` is empty, else failed with every mismatch listed. */
  const judge = (file: string, check: string, bad: Omit<VerifyMismatch, 'file' | 'check'>[], note?: string): boolean => {
    if (bad.length === 0) {
      pass(file, check, note);
      return true;
    }
    checks.push(note === undefined ? { file, check, status: 'failed' } : { file, check, status: 'failed', note });
    for (const b of bad) mismatches.push({ file, check, ...b });
    return false;
  };
  const same = (expected: string | number, found: string | number): Omit<VerifyMismatch, 'file' | 'check'>[] => (expected === found ? [] : [{ expected, found }]);

  const collectOutput = options.against !== undefined && m.output.records <= DIFF_RECORD_LIMIT && m.input.records <= DIFF_RECORD_LIMIT;
  const outHashes = collectOutput ? new HashList() : null;

  // ---- every part: bytes on disk, then its records ----
  const parts = m.output.parts;
  let partsDone = 0;
  let recordsSeen = 0;
  const partDone = (s: PartScan): PartScan => {
    partsDone++;
    recordsSeen += s.records;
    options.onProgress?.({ stage: 'parts', done: partsDone, total: parts.length, records: recordsSeen, elapsedMs: Date.now() - t0 });
    return s;
  };
  // 0: the calling thread reads every part (as in shuffle and profile).
  const threads = Math.min(parts.length, options.threads ?? (sum(parts.map((p) => p.bytes)) >= PARALLEL_MIN_BYTES ? availableParallelism() : 0));
  let scans: PartScan[];
  // With --stats: the parts' statistics merged, for the whole input's.
  let wholeStats: TableStats | null = null;
  if (threads > 0) {
    // Each part on a worker thread (src/workers/verify-worker.ts), the least busy one first; two
    // a thread at a time. (A thread starts every task it is sent at once: with all of 2,000 parts
    // sent, each thread read a thousand at a time, 760 MiB at the peak against 110 on one thread.)
    const lanes = new WorkerLanes<VerifyPartTask, SerializedPartScan, SerializedStats | null>(resolveWorkerFile('verify-worker.js'), threads, m);
    // Two parts a thread keep its reads going; one where each holds a table of every column.
    const limit = pLimit(plan.statsColumns !== null ? threads : 2 * threads);
    try {
      scans = await Promise.all(
        parts.map((p) => limit(async () => partDone(readPartScan(await lanes.run({ path: join(dir, p.path), display: p.path, hashes: outHashes !== null }), outHashes)))),
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
    scans = await Promise.all(parts.map((p) => limit(async () => partDone(await scanPart(join(dir, p.path), p.path, plan, outHashes, gather, p.strata)))));
    if (gather) wholeStats = gather.whole;
  }

  const valuesOut = plan.strataIndex === null;
  const allRead = scans.every((s) => s.present && s.readError === null);
  parts.forEach((p, k) => {
    const s = scans[k]!;
    const f = p.path;
    if (!judge(f, 'present', s.present ? [] : [{ expected: 'a file', found: 'missing' }])) {
      for (const c of partCheckNames(plan)) skip(f, c, 'the file is missing');
      return;
    }
    if (s.sha256 === '') {
      // Could not be read at all (permissions, an I/O error): 'readable' says why.
      skip(f, 'bytes', 'the file could not be read');
      skip(f, 'sha256', 'the file could not be read');
    } else {
      judge(f, 'bytes', same(p.bytes, s.bytes));
      judge(f, 'sha256', same(p.sha256, s.sha256));
    }
    judge(f, 'readable', s.readError === null ? [] : [{ expected: 'records the reader accepts', found: s.readError }]);
    if (plan.format !== 'jsonl' && plan.header) {
      const want = [...plan.columns, ...(plan.foldColumn !== null ? [plan.foldColumn] : [])];
      if (s.columns === null) skip(f, 'header', 'no header could be read');
      else judge(f, 'header', same(JSON.stringify(want), JSON.stringify(s.columns)));
    }
    if (s.readError !== null) {
      for (const c of partCheckNames(plan).filter((c) => c !== 'header')) skip(f, c, 'the file could not be read to its end');
      return;
    }
    judge(f, 'records', same(p.records, s.records));
    if (valuesOut) skip(f, 'strata', 'the manifest was written without data values (excludeValues)');
    else {
      const bad: Omit<VerifyMismatch, 'file' | 'check'>[] = [];
      for (let i = 0; i < plan.strataCount; i++) {
        if (p.strata[i] !== s.strata[i]) bad.push({ item: plan.strataLabels[i]!, expected: p.strata[i] ?? 'no entry', found: s.strata[i]! });
      }
      if (p.strata.length !== plan.strataCount) bad.push({ item: 'entries', expected: plan.strataCount, found: p.strata.length });
      for (const [label, u] of s.unknown) bad.push({ item: label, line: u.line, expected: 0, found: u.count });
      judge(f, 'strata', bad);
    }
    if (plan.folds > 1) {
      judge(f, 'fold values', s.badFold === null ? [] : [{ line: s.badFold.line, expected: `a fold column with values 0..${plan.folds - 1}`, found: `${s.badFold.text} (${s.badFold.count} record${s.badFold.count === 1 ? '' : 's'})` }]);
      const bad: Omit<VerifyMismatch, 'file' | 'check'>[] = [];
      for (let g = 0; g < plan.folds; g++) {
        if (p.folds?.[g] !== s.folds[g]) bad.push({ item: `fold ${g}`, expected: p.folds?.[g] ?? 'no entry', found: s.folds[g]! });
      }
      judge(f, 'folds', bad);
      if (valuesOut) skip(f, 'fold strata', 'the manifest was written without data values (excludeValues)');
      else {
        const badFs: Omit<VerifyMismatch, 'file' | 'check'>[] = [];
        for (let g = 0; g < plan.folds; g++) {
          for (let i = 0; i < plan.strataCount; i++) {
            const want = p.foldStrata?.[g]?.[i];
            const got = s.foldStrata[g * plan.strataCount + i]!;
            if (want !== got) badFs.push({ item: `fold ${g}, ${plan.strataLabels[i]}`, expected: want ?? 'no entry', found: got });
          }
        }
        judge(f, 'fold strata', badFs);
      }
    }
    judge(f, 'fingerprint', same(p.fingerprint, s.fingerprint.toHex()));
    if (s.stats) judge(f, 'statistics', compareStats(p.stats, s.stats));
    checkOrder(f, s);
  });

  /** The order inside a part: what can be checked of the promise without the inputs. */
  function checkOrder(f: string, s: PartScan): void {
    const o = plan.order;
    if (o === 'interleaved') skip(f, 'order', 'dealing scheme 1 (rowdeck 0.1): classes evenly interleaved inside the part, not shuffled; shuffle again for a random order');
    // A random order has no pattern to check: nothing is listed for it.
    else if (o === 'random') return;
    else if (o === 'spread' && plan.strataIndex === null) skip(f, 'order', 'spread: the manifest was written without data values (excludeValues)');
    else judge(f, 'order', s.orderBreak === null ? [] : [s.orderBreak], o === 'spread' ? 'spread: every record of a class within one of its share of the positions so far' : 'grouped: each group in one run');
  }

  // ---- files that look like parts but are not listed (a stray or planted part) ----
  for (const f of findUnlistedParts(dir, m)) {
    judge(f, 'listed', [{ expected: 'no such file (the manifest does not list it)', found: 'a file that looks like a part' }]);
  }

  // ---- rejected records, kept aside by --on-bad-record quarantine ----
  if (m.input.rejectsFile !== null) {
    const f = m.input.rejectsFile;
    const n = await countRejects(join(dir, f));
    if (judge(f, 'present', n === null ? [{ expected: 'a file', found: 'missing' }] : [])) judge(f, 'records', same(m.input.rejected, n!));
    else skip(f, 'records', 'the file is missing');
  }

  // ---- the manifest's own totals, and the whole output against them ----
  const M = 'manifest.json';
  const outFp = new Fingerprint();
  for (const s of scans) outFp.merge(s.fingerprint.toJSON());
  judge(M, 'output records', [
    ...same(m.input.records, m.output.records),
    ...(m.output.records === sum(parts.map((p) => p.records)) ? [] : [{ item: 'sum of parts', expected: m.output.records, found: sum(parts.map((p) => p.records)) }]),
    ...(allRead && sum(scans.map((s) => s.records)) !== m.output.records ? [{ item: 'records read', expected: m.output.records, found: sum(scans.map((s) => s.records)) }] : []),
  ]);
  if (allRead) judge(M, 'output fingerprint', same(m.output.fingerprint, outFp.toHex()));
  else skip(M, 'output fingerprint', 'some parts are missing or could not be read');
  judge(M, 'input fingerprint', same(m.input.fingerprint, m.output.fingerprint));
  {
    const bad: Omit<VerifyMismatch, 'file' | 'check'>[] = [];
    const totals = new Float64Array(plan.strataCount);
    for (const p of parts) for (let i = 0; i < plan.strataCount; i++) totals[i]! += p.strata[i] ?? 0;
    m.strata.values.forEach((v, i) => {
      if (v.records !== totals[i]) bad.push({ item: `${plan.strataLabels[i]} (sum of parts)`, expected: v.records, found: totals[i]! });
    });
    if (sum(m.strata.values.map((v) => v.records)) !== m.input.records) bad.push({ item: 'sum of classes', expected: m.input.records, found: sum(m.strata.values.map((v) => v.records)) });
    judge(M, 'strata totals', bad);
  }
  // The whole input's statistics are the parts' merged (exact, as the run made them).
  if (plan.statsColumns !== null) {
    if (allRead && wholeStats) {
      judge(M, 'input statistics', compareStats(m.input.stats, wholeStats.summary({ excludeValues: plan.excludeValues })), 'merged from the parts read');
    } else skip(M, 'input statistics', 'some parts are missing or could not be read');
  }

  // ---- the balance promise, recomputed from the counts ----
  {
    const fromFiles = allRead && !valuesOut;
    const partStrata = parts.map((p, k) => (fromFiles ? Array.from(scans[k]!.strata) : p.strata));
    const foldStrata = parts.map((p, k) => (fromFiles ? Array.from({ length: plan.folds }, (_, g) => Array.from(scans[k]!.foldStrata.subarray(g * plan.strataCount, (g + 1) * plan.strataCount))) : (p.foldStrata ?? [])));
    const dev = computeMaxDeviation(parts, partStrata, foldStrata, plan);
    const note = fromFiles ? 'from the counts read from the files' : "from the manifest's counts";
    judge(M, 'balance', Math.abs(dev - m.balance.maxDeviation) <= 1e-12 ? [] : [{ item: 'maxDeviation', expected: m.balance.maxDeviation, found: dev }], note);
    // Hash assignment promises no tolerance: its shares are what the keys give.
    if ((m.options as { assign?: string }).assign === 'hash') skip(M, 'tolerance', 'not enforced with assign "hash": the class shares are reported, not kept within a tolerance');
    else judge(M, 'tolerance', withinTolerance(dev, m.balance.tolerance) ? [] : [{ item: 'maxDeviation', expected: `<= ${m.balance.tolerance}`, found: dev }], note);
  }

  // ---- --against: the inputs hold exactly the output's records ----
  let against: VerifyAgainst | null = null;
  let misordered: { expected: string; found: string } | null = null;
  if (options.against !== undefined) {
    const inputs = options.against;
    if (inputs.length === 0) throw new RowdeckError('RDK_MISSING_ARGUMENT', 'verify: against needs at least one input file.');
    const inHashes = outHashes !== null ? new HashList() : null;
    // Bad records are counted, not fatal: the manifest says how many the run refused.
    const read = await scanInputs(inputs, plan, inHashes, (done, records) =>
      options.onProgress?.({ stage: 'inputs', done, total: inputs.length, records, elapsedMs: Date.now() - t0 }),
    );
    const A = '(inputs)';
    for (const e of read.errors) judge(e.file, 'readable', [{ expected: 'records the reader accepts', found: e.message }]);
    for (const h of read.headers) judge(h.file, 'header', same(JSON.stringify(plan.columns), JSON.stringify(h.columns)));
    misordered = misorderedInputs(inputs, m.input.files, read.perFile);
    if (misordered) {
      judge(A, 'input order', [{ item: 'the order matters: give the inputs in the order the manifest lists them', expected: misordered.expected, found: misordered.found }]);
    } else if (inputs.length === m.input.files.length) {
      read.perFile.forEach((n, k) => judge(nameInput(inputs[k]!), 'records', same(m.input.files[k]!.records, n)));
    } else {
      judge(A, 'records', same(m.input.records, read.records), `${inputs.length} input(s) given, the manifest lists ${m.input.files.length}`);
    }
    judge(A, 'rejected', same(m.input.rejected, read.rejected));
    const fp = read.fingerprint.toHex();
    judge(A, 'input fingerprint', same(m.input.fingerprint, fp));
    judge(A, 'output fingerprint', allRead ? same(fp, outFp.toHex()) : [{ expected: fp, found: `${outFp.toHex()} (some parts could not be read)` }]);
    against = { inputs, records: read.records, rejected: read.rejected, fingerprint: fp, differences: null };
    const differs = fp !== outFp.toHex() || read.records !== sum(scans.map((s) => s.records)) || !allRead;
    if (differs) {
      // Listed from what could be read: a missing part's records show up as missing ones.
      if (inHashes && outHashes && !inHashes.overflow && !outHashes.overflow) {
        options.onProgress?.({ stage: 'differences', done: 0, total: 1, records: 0, elapsedMs: Date.now() - t0 });
        against.differences = await listDifferences(inHashes, outHashes, inputs, parts, dir, plan);
      } else {
        const diff = read.records - sum(scans.map((s) => s.records));
        against.differences = { missing: Math.max(0, diff), extra: Math.max(0, -diff), listed: [], listing: 'counts only' };
        skip(A, 'differences', `more than ${DIFF_RECORD_LIMIT.toLocaleString('en-US')} records: compare the fingerprints and counts`);
      }
      const d = against.differences;
      if (d.listing === 'listed') {
        judge(A, 'differences', [
          ...(d.missing > 0 ? [{ item: 'records missing from the output', expected: 0, found: d.missing }] : []),
          ...(d.extra > 0 ? [{ item: 'records not in the inputs', expected: 0, found: d.extra }] : []),
        ]);
      }
    }
  }

  // ---- --against: the seed replayed ----
  let replay: VerifyReport['replay'] = null;
  if (options.against !== undefined) {
    const can = replayable(m);
    const R = '(replay)';
    if (options.replay === false) replay = { status: 'skipped', seed: m.seed, note: `not asked for (${options.surface === 'cli' ? '--no-replay' : 'replay: false'})` };
    else if (!can.ok) replay = { status: 'skipped', seed: m.seed, note: can.why };
    else if (options.against.some((p) => isStreamInput(p))) replay = { status: 'skipped', seed: m.seed, note: 'standard input or a pipe can be read only once' };
    else if (misordered) replay = { status: 'skipped', seed: m.seed, note: `the inputs are given in another order than the manifest's (${misordered.expected}), and the order decides where each record goes` };
    if (replay) skip(R, 'replay', replay.note);
    else {
      options.onProgress?.({ stage: 'replay', done: 0, total: 1, records: 0, elapsedMs: Date.now() - t0 });
      let replayed: Manifest | null = null;
      try {
        replayed = await replayShuffle(m, options.against, dir, {
          ...(options.tempDir !== undefined ? { tempDir: options.tempDir } : {}),
          ...(options.threads !== undefined ? { threads: options.threads } : {}),
          ...(options.memory !== undefined ? { memory: options.memory } : {}),
        });
      } catch (err) {
        const env = environmentFault(err);
        if (env || !(err instanceof RowdeckError)) throw env ?? err;
        judge(R, 'replay', [{ expected: `the shuffle to run again with seed ${JSON.stringify(m.seed)} and the manifest's options`, found: err.message }]);
        replay = { status: 'failed', seed: m.seed, note: `the run could not be repeated: ${err.message}` };
      }
      if (replayed) {
        const files = scans.map((sc) => (sc.present && sc.sha256 !== '' ? { bytes: sc.bytes, sha256: sc.sha256 } : null));
        const diff = compareReplay(m, replayed, files);
        let ok = judge(M, 'replay', diff.whole.map(({ item, expected, found }) => ({ item, expected, found })), "the shuffle run again from the manifest's seed and options; expected: what it gives");
        parts.forEach((p, k) => {
          if (!judge(p.path, 'replay', diff.parts[k]!.map(({ item, expected, found }) => ({ item, expected, found })), "the shuffle run again from the manifest's seed and options; expected: what it gives")) ok = false;
        });
        replay = ok
          ? { status: 'passed', seed: m.seed, note: `the shuffle run again with seed ${JSON.stringify(m.seed)} and the manifest's options gives exactly these parts` }
          : { status: 'failed', seed: m.seed, note: `the parts or the manifest are not what seed ${JSON.stringify(m.seed)} with the manifest's options gives (an edited seed or option, or altered parts)` };
      }
    }
  }

  return {
    ok: mismatches.length === 0,
    dir,
    manifestVersion: m.manifestVersion,
    dealingScheme: m.dealingScheme ?? 1,
    order: m.dealingScheme === undefined ? 'interleaved' : ((m.options as { order: PartOrder }).order),
    records: m.output.records,
    parts: parts.length,
    checks,
    mismatches,
    against,
    replay,
  };
}

/**
 * Files in the folder (and its split folders) named like parts (.csv, .tsv, .jsonl …, optionally
 * .gz) that the manifest does not list; hidden entries (rowdeck's work folders) aside.
 */
function findUnlistedParts(dir: string, m: Manifest): string[] {
  const listed = new Set(m.output.parts.map((p) => normalize(p.path)));
  if (m.input.rejectsFile !== null) listed.add(normalize(m.input.rejectsFile));
  const partLike = /\.(?:csv|tsv|tab|jsonl|ndjson)(?:\.gz)?$/i;
  const found: string[] = [];
  const walk = (rel: string, depth: number): void => {
    let entries: Dirent[];
    try {
      entries = readdirSync(rel === '' ? dir : join(dir, rel), { withFileTypes: true });
    } catch {
      return;
    }
    for (const e of entries) {
      if (e.name.startsWith('.')) continue;
      const r = rel === '' ? e.name : join(rel, e.name);
      if (e.isDirectory() && depth < 3) walk(r, depth + 1);
      else if (e.isFile() && partLike.test(e.name) && !listed.has(r)) found.push(r);
    }
  };
  walk('', 0);
  return found.sort();
}

function sum(xs: number[]): number {
  let s = 0;
  for (const x of xs) s += x;
  return s;
}

/** Checks done per part after presence and size (for the "skipped" entries). */
function partCheckNames(plan: ReadPlan): string[] {
  return [
    'bytes',
    'sha256',
    'readable',
    ...(plan.format !== 'jsonl' && plan.header ? ['header'] : []),
    'records',
    'strata',
    ...(plan.folds > 1 ? ['fold values', 'folds', 'fold strata'] : []),
    'fingerprint',
    ...(plan.statsColumns !== null ? ['statistics'] : []),
    ...(plan.order !== 'random' ? ['order'] : []),
  ];
}

/**
 * A manifest's column statistics against those computed from the files: one mismatch a column
 * that differs, naming the first figure that does (as JSON, cut short).
 */
function compareStats(expected: unknown, found: ColumnSummary[]): Omit<VerifyMismatch, 'file' | 'check'>[] {
  if (!Array.isArray(expected)) return [{ expected: 'column statistics', found: expected === undefined ? 'none' : JSON.stringify(expected).slice(0, 80) }];
  const bad: Omit<VerifyMismatch, 'file' | 'check'>[] = [];
  if (expected.length !== found.length) bad.push({ item: 'columns', expected: expected.length, found: found.length });
  const text = (v: unknown): string => {
    const t = JSON.stringify(v) ?? 'none';
    return t.length > 80 ? `${t.slice(0, 77)}...` : t;
  };
  found.forEach((c, i) => {
    const e = expected[i] as Record<string, unknown> | undefined;
    if (e === undefined || JSON.stringify(e) === JSON.stringify(c)) return;
    const got = c as unknown as Record<string, unknown>;
    const key = [...new Set([...Object.keys(e), ...Object.keys(got)])].find((k) => JSON.stringify(e[k]) !== JSON.stringify(got[k])) ?? 'order of figures';
    bad.push({ item: `${c.name}: ${key}`, expected: text(e[key]), found: text(got[key]) });
  });
  return bad;
}

/**
 * Largest relative deviation of a class's share, over parts and over each split's folds, the
 * measure the shuffle promised to keep within its tolerance (see core/balance.ts).
 */
function computeMaxDeviation(parts: PartRecord[], partStrata: number[][], foldStrata: number[][][], plan: ReadPlan): number {
  const S = plan.strataCount;
  const P = parts.length;
  const partCounts = new Float64Array(P * S);
  const totals = new Float64Array(S);
  partStrata.forEach((row, p) => {
    for (let s = 0; s < S; s++) {
      partCounts[p * S + s] = row[s] ?? 0;
      totals[s]! += row[s] ?? 0;
    }
  });
  const K = plan.folds;
  let folds: Float64Array | null = null;
  let units = 0;
  if (K > 1) {
    // Folds are compared within each split: the split's partitions together.
    const splitOf = new Map<string | null, number>();
    for (const p of parts) if (!splitOf.has(p.split)) splitOf.set(p.split, splitOf.size);
    units = splitOf.size * K;
    const counts = new Float64Array(units * S);
    parts.forEach((p, k) => {
      const base = splitOf.get(p.split)! * K;
      for (let g = 0; g < K; g++) for (let s = 0; s < S; s++) counts[(base + g) * S + s]! += foldStrata[k]?.[g]?.[s] ?? 0;
    });
    folds = counts;
  }
  return balanceOfUnits(partCounts, P, folds, units, totals).deviation;
}

// ---- reading the manifest -------------------------------------------------------------------

export function loadManifest(dir: string): Manifest {
  const path = join(dir, 'manifest.json');
  let text: string;
  try {
    text = readFileSync(path, 'utf8');
  } catch (err) {
    const code = (err as NodeJS.ErrnoException).code;
    let kind: 'folder' | 'other' | 'missing' = 'missing';
    try {
      kind = statSync(dir).isDirectory() ? 'folder' : 'other';
    } catch {
      // Not there (or not reachable): said below.
    }
    if (kind === 'other') throw new RowdeckError('RDK_MANIFEST', `${dir}: not a folder (a file). Give the folder rowdeck shuffle wrote its parts to (its --out), not one of its files.`, { file: dir });
    if (kind === 'missing') throw new RowdeckError('RDK_MANIFEST', `${dir}: no such folder. Give the folder rowdeck shuffle wrote its parts to (its --out).`, { file: dir });
    if (code === 'ENOENT') {
      throw new RowdeckError('RDK_MANIFEST', `${path}: no such file. Give the folder rowdeck shuffle wrote (its --out); a run that failed or was interrupted leaves no manifest, so run it again.`, { file: path });
    }
    throw new RowdeckError('RDK_MANIFEST', `${path}: cannot be read (${(err as Error).message}). Check its permissions.`, { file: path, errno: code });
  }
  let raw: unknown;
  try {
    raw = JSON.parse(text);
  } catch (err) {
    throw new RowdeckError('RDK_MANIFEST', `${path}: not valid JSON (${(err as Error).message}). It was edited or cut short; run rowdeck shuffle again to write a new one.`, { file: path });
  }
  checkManifestShape(raw, path);
  return raw;
}

/**
 * Checks that the fields verify relies on are there with the right types, so a damaged manifest
 * gives one clear message instead of a crash halfway. (docs/manifest.schema.json is the full
 * description; this is its load-bearing subset.)
 */
function checkManifestShape(raw: unknown, path: string): asserts raw is Manifest {
  const fail = (field: string, want: string): never => {
    throw new RowdeckError('RDK_MANIFEST', `${path}: field "${field}" should be ${want}. The manifest is damaged or was edited; run rowdeck shuffle again to write a new one.`, { file: path, field });
  };
  const obj = (v: unknown, field: string): Record<string, unknown> => (typeof v === 'object' && v !== null && !Array.isArray(v) ? (v as Record<string, unknown>) : fail(field, 'an object'));
  const arr = (v: unknown, field: string): unknown[] => (Array.isArray(v) ? v : fail(field, 'an array'));
  const count = (v: unknown, field: string): number => (typeof v === 'number' && Number.isSafeInteger(v) && v >= 0 ? v : fail(field, 'a whole number ≥ 0'));
  const str = (v: unknown, field: string): string => (typeof v === 'string' ? v : fail(field, 'a string'));
  const hex = (v: unknown, field: string, len: number): string => (typeof v === 'string' && new RegExp(`^[0-9a-f]{${len}}$`).test(v) ? v : fail(field, `${len} lowercase hex digits`));
  const strings = (v: unknown, field: string): string[] => arr(v, field).map((x, i) => str(x, `${field}[${i}]`));

  const m = obj(raw, '(top level)');
  if (m.manifestVersion !== 1 && m.manifestVersion !== MANIFEST_VERSION) {
    throw new RowdeckError(
      'RDK_MANIFEST',
      `${path}: manifestVersion is ${JSON.stringify(m.manifestVersion)}; this rowdeck reads versions 1 to ${MANIFEST_VERSION}. ${typeof m.manifestVersion === 'number' && m.manifestVersion > MANIFEST_VERSION ? 'Use the rowdeck version that wrote it, or a newer one.' : 'The file is not a rowdeck manifest, or is damaged.'}`,
      { file: path, field: 'manifestVersion' },
    );
  }
  if (m.manifestVersion !== 1 && m.dealingScheme !== DEALING_SCHEME) fail('dealingScheme', String(DEALING_SCHEME));
  const o = obj(m.options, 'options');
  if (!['csv', 'tsv', 'jsonl'].includes(o.format as string)) fail('options.format', '"csv", "tsv" or "jsonl"');
  if (o.delimiter !== null && typeof o.delimiter !== 'string') fail('options.delimiter', 'a string or null');
  if (typeof o.header !== 'boolean') fail('options.header', 'true or false');
  strings(o.stratify, 'options.stratify');
  count(o.folds, 'options.folds');
  if (typeof o.excludeValues !== 'boolean') fail('options.excludeValues', 'true or false');
  if (!['fail', 'skip', 'quarantine'].includes(o.onBadRecord as string)) fail('options.onBadRecord', '"fail", "skip" or "quarantine"');

  const input = obj(m.input, 'input');
  strings(input.columns, 'input.columns');
  arr(input.files, 'input.files').forEach((f, i) => {
    const x = obj(f, `input.files[${i}]`);
    str(x.path, `input.files[${i}].path`);
    count(x.records, `input.files[${i}].records`);
  });
  count(input.records, 'input.records');
  count(input.rejected, 'input.rejected');
  if (input.rejectsFile !== null) safePath(str(input.rejectsFile, 'input.rejectsFile'), 'input.rejectsFile', path);
  hex(input.fingerprint, 'input.fingerprint', 16);

  const strata = obj(m.strata, 'strata');
  const columns = strings(strata.columns, 'strata.columns');
  const values = arr(strata.values, 'strata.values');
  values.forEach((v, i) => {
    const x = obj(v, `strata.values[${i}]`);
    count(x.records, `strata.values[${i}].records`);
    if (x.value !== null) {
      const vals = arr(x.value, `strata.values[${i}].value`);
      if (vals.length !== columns.length) fail(`strata.values[${i}].value`, `an array of ${columns.length} value(s), one per column of strata.columns`);
      vals.forEach((y, j) => y !== null && str(y, `strata.values[${i}].value[${j}]`));
    }
  });
  arr(strata.bins, 'strata.bins').forEach((b, i) => {
    const x = obj(b, `strata.bins[${i}]`);
    str(x.column, `strata.bins[${i}].column`);
    arr(x.edges, `strata.bins[${i}].edges`).forEach((e, j) => typeof e === 'number' || fail(`strata.bins[${i}].edges[${j}]`, 'a number'));
  });
  if (strings(o.stratify, 'options.stratify').length !== columns.length) fail('options.stratify', `a list as long as strata.columns (${columns.length})`);

  const balance = obj(m.balance, 'balance');
  if (typeof balance.tolerance !== 'number') fail('balance.tolerance', 'a number');
  if (typeof balance.maxDeviation !== 'number') fail('balance.maxDeviation', 'a number');

  const output = obj(m.output, 'output');
  count(output.records, 'output.records');
  hex(output.fingerprint, 'output.fingerprint', 16);
  if (output.foldColumn !== null) str(output.foldColumn, 'output.foldColumn');
  if ((o.folds as number) > 1 && output.foldColumn === null) fail('output.foldColumn', `a column name (options.folds is ${String(o.folds)})`);
  const parts = arr(output.parts, 'output.parts');
  if (parts.length === 0) fail('output.parts', 'a non-empty array');
  parts.forEach((p, i) => {
    const f = `output.parts[${i}]`;
    const x = obj(p, f);
    safePath(str(x.path, `${f}.path`), `${f}.path`, path);
    if (x.split !== null) str(x.split, `${f}.split`);
    count(x.records, `${f}.records`);
    count(x.bytes, `${f}.bytes`);
    hex(x.sha256, `${f}.sha256`, 64);
    hex(x.fingerprint, `${f}.fingerprint`, 16);
    arr(x.strata, `${f}.strata`).forEach((n, j) => count(n, `${f}.strata[${j}]`));
    if (x.folds !== null) arr(x.folds, `${f}.folds`).forEach((n, j) => count(n, `${f}.folds[${j}]`));
    if (x.foldStrata !== null) arr(x.foldStrata, `${f}.foldStrata`).forEach((row, g) => arr(row, `${f}.foldStrata[${g}]`).forEach((n, j) => count(n, `${f}.foldStrata[${g}][${j}]`)));
  });
}

/** A part path must stay inside the folder: verify reads only what the run wrote. */
function safePath(p: string, field: string, path: string): void {
  if (p === '' || isAbsolute(p) || normalize(p).split(/[\\/]/).includes('..')) {
    throw new RowdeckError('RDK_MANIFEST', `${path}: field "${field}" is ${JSON.stringify(p)}, which points outside the output folder. The manifest was edited; run rowdeck shuffle again.`, { file: path, field });
  }
}

function createReadPlan(m: Manifest): ReadPlan {
  const o = m.options as { format: InputFormat; delimiter: string | null; header: boolean; stratify: string[]; folds: number };
  const columns = m.strata.columns;
  const bins = columns.map((c, w) => {
    // "COL:bins=Q" in the options marks a binned column; its edges are in strata.bins.
    if (o.stratify[w] === c) return null;
    return m.strata.bins.find((b) => b.column === c)?.edges ?? null;
  });
  const withheld = columns.length > 0 && m.strata.values.some((v) => v.value === null);
  let strataIndex: Map<string, number> | null = null;
  if (!withheld) {
    strataIndex = new Map();
    m.strata.values.forEach((v, i) => {
      const key = keyOfValues(v.value ?? []);
      strataIndex!.set(key, i);
    });
  }
  const delimiter = o.delimiter ?? undefined;
  return {
    format: o.format,
    delimiter,
    delimiterByte: (delimiter ?? (o.format === 'tsv' ? '\t' : ',')).charCodeAt(0),
    header: o.header,
    columns: m.input.columns,
    stratify: columns,
    bins,
    strataIndex,
    strataCount: m.strata.values.length,
    strataLabels: m.strata.values.map((v, i) => describeStratum(columns, withheld ? null : v.value, i)),
    folds: Math.max(1, o.folds),
    foldColumn: m.output.foldColumn,
    statsColumns: m.input.stats !== undefined ? m.input.columns : null,
    excludeValues: (m.options as { excludeValues?: boolean }).excludeValues === true,
    order: m.dealingScheme === undefined ? 'interleaved' : (m.options as { order: PartOrder }).order,
    groupColumns: m.options.group !== null ? [m.options.group as string] : (m.options.key as string[]),
  };
}

// ---- reading records --------------------------------------------------------------------------


/** `grouped`: whether each group's records form one run (a group seen again after others breaks it). */
class GroupRuns {
  readonly #done = new Set<string>();
  #current: string | null = null;
  add(key: string): boolean {
    if (key === this.#current) return true;
    if (this.#current !== null) this.#done.add(this.#current);
    this.#current = key;
    return !this.#done.has(key);
  }
}

function labelOfGroup(plan: ReadPlan, key: string): string {
  return plan.excludeValues ? 'a group' : describeValues(plan.groupColumns, stratumValues(key));
}

const DIGIT_0 = 0x30;
const DIGIT_9 = 0x39;

/**
 * Where the record's own bytes end and its fold, undoing exactly what the gather stage added:
 * CSV/TSV `<delimiter><fold>` at the end; JSON Lines `,"<name>":<fold>` (no comma in an empty
 * object) before the closing brace. Returns null when the record does not carry that field.
 */
function splitFold(d: Buffer, s: number, e: number, plan: ReadPlan, nameBytes: Buffer): { fold: number; text: string; cutStart: number; cutEnd: number } | null {
  if (plan.format !== 'jsonl') {
    let ds = e;
    while (ds > s && d[ds - 1]! >= DIGIT_0 && d[ds - 1]! <= DIGIT_9) ds--;
    if (ds === e || ds - 1 < s || d[ds - 1] !== plan.delimiterByte) return null;
    const text = d.toString('latin1', ds, e);
    return { fold: Number(text), text, cutStart: ds - 1, cutEnd: e };
  }
  let close = e - 1;
  while (close > s && d[close] !== 0x7d) close--;
  if (d[close] !== 0x7d) return null;
  let ds = close;
  while (ds > s && d[ds - 1]! >= DIGIT_0 && d[ds - 1]! <= DIGIT_9) ds--;
  if (ds === close) return null;
  const fs = ds - nameBytes.length;
  if (fs < s || !d.subarray(fs, ds).equals(nameBytes)) return null;
  const text = d.toString('latin1', ds, close);
  return { fold: Number(text), text, cutStart: fs > s && d[fs - 1] === 0x2c ? fs - 1 : fs, cutEnd: close };
}

/**
 * The 64-bit hash one record adds to a fingerprint, as [hi, lo]: a fingerprint of that record
 * alone. Going through Fingerprint keeps verify on whatever hash the shuffle uses.
 */
const single = new Fingerprint();
const singleOut = new Uint32Array(2);
function recordHash(buf: Uint8Array, start: number, end: number): Uint32Array {
  single.hi = 0;
  single.lo = 0;
  single.count = 0;
  single.addBytes(buf, start, end);
  singleOut[0] = single.hi;
  singleOut[1] = single.lo;
  return singleOut;
}

/** A record's own bytes (the fold field cut out), hashed like the shuffle's fingerprint. */
class RecordHasher {
  #scratch = Buffer.alloc(4096);

  hash(d: Buffer, s: number, e: number, cut: { cutStart: number; cutEnd: number } | null): Uint32Array {
    if (cut === null) return recordHash(d, s, e);
    if (cut.cutEnd === e) return recordHash(d, s, cut.cutStart);
    const n = cut.cutStart - s + (e - cut.cutEnd);
    if (this.#scratch.length < n) this.#scratch = Buffer.alloc(Math.max(n, this.#scratch.length * 2));
    d.copy(this.#scratch, 0, s, cut.cutStart);
    d.copy(this.#scratch, cut.cutStart - s, cut.cutEnd, e);
    return recordHash(this.#scratch, 0, n);
  }

  text(d: Buffer, s: number, e: number, cut: { cutStart: number; cutEnd: number } | null): string {
    const b = cut === null ? d.subarray(s, e) : Buffer.concat([d.subarray(s, cut.cutStart), d.subarray(cut.cutEnd, e)]);
    const t = b.toString('utf8');
    return t.length > RECORD_TEXT_LIMIT ? t.slice(0, RECORD_TEXT_LIMIT) + '…' : t;
  }
}

/**
 * Bytes of a file, hashed (sha256) and counted as they stream past. Reads of up to 1 MiB, or the
 * file's size and one byte where that is less: a read stream takes a buffer of its read size for
 * every read, and thousands of small parts each took a fresh 1 MiB.
 */
async function* hashStream(path: string, sink: { hash: ReturnType<typeof createHash>; bytes: number }): AsyncGenerator<Buffer> {
  let size = 1 << 20;
  try {
    size = Math.max(1, Math.min(size, statSync(path).size + 1));
  } catch {
    // The read reports it.
  }
  for await (const chunk of createReadStream(path, { highWaterMark: size })) {
    const b = chunk as Buffer;
    sink.hash.update(b);
    sink.bytes += b.length;
    yield b;
  }
}

async function hashFile(path: string): Promise<{ bytes: number; sha256: string }> {
  const sink = { hash: createHash('sha256'), bytes: 0 };
  for await (const _ of hashStream(path, sink)) void _;
  return { bytes: sink.bytes, sha256: sink.hash.digest('hex') };
}

/**
 * Feeds a source through a record reader, batch by batch. A part or input with no records is
 * not an error here (the counts say whether it should have had some).
 */
async function readAll(source: string | Readable | Buffer, reader: RecordReader, onBatch: (b: RecordBatch) => void): Promise<void> {
  try {
    for await (const chunk of Buffer.isBuffer(source) ? [source] : openInput(source)) {
      const b = reader.push(chunk);
      if (b) onBatch(b);
    }
    const b = reader.end();
    if (b) onBatch(b);
  } catch (err) {
    if (err instanceof RowdeckError && (err.code === 'RDK_INPUT_EMPTY' || err.code === 'RDK_HEADER_ONLY') && reader.stats.records === 0 && reader.stats.rejected === 0) return;
    throw err;
  }
}

async function scanPart(path: string, display: string, plan: ReadPlan, hashes: HashList | null, gather: PartStatsGather | null = null, classCounts: number[] | null = null): Promise<PartScan> {
  const S = plan.strataCount;
  const K = plan.folds;
  const scan: PartScan = {
    present: true,
    bytes: 0,
    sha256: '',
    readError: null,
    columns: null,
    records: 0,
    strata: new Float64Array(S),
    folds: new Float64Array(K),
    foldStrata: new Float64Array(K * S),
    unknown: new Map(),
    badFold: null,
    fingerprint: new Fingerprint(),
    stats: null,
    orderBreak: null,
  };
  try {
    if (!statSync(path).isFile()) scan.present = false;
  } catch {
    scan.present = false;
  }
  if (!scan.present) return scan;
  // A part that cannot be opened (permissions) is said so by name, before any read.
  try {
    closeSync(openSync(path, 'r'));
  } catch (err) {
    scan.readError = ioError(err, display, 'opening a part').message;
    scan.sha256 = '';
    return scan;
  }

  const sink = { hash: createHash('sha256'), bytes: 0 };
  // With statistics to check, every column is wanted after the class columns (a column may be
  // both), and a table of them is fed from there (TableStats.addBatch's `first`).
  const table = gather ? gather.take() : null;
  // The promised order, checked record by record (see checkOrder).
  const spread = plan.order === 'spread' && classCounts !== null && plan.strataIndex !== null ? new SpreadCheck(classCounts) : null;
  const grouped = plan.order === 'grouped' ? new GroupRuns() : null;
  const groupAt = plan.stratify.length + (table ? table.columns.length : 0);
  const reader = new RecordReader({
    format: plan.format,
    ...(plan.delimiter !== undefined ? { delimiter: plan.delimiter } : {}),
    header: plan.header,
    wanted: [...plan.stratify, ...(table ? table.columns : []), ...(grouped ? plan.groupColumns : [])],
    file: display,
    onBadRecord: 'fail',
  });
  const hasher = new RecordHasher();
  const nameBytes = Buffer.from(plan.foldColumn !== null ? `${JSON.stringify(plan.foldColumn)}:` : '', 'utf8');
  const fast = plan.strataIndex !== null && plan.stratify.length === 1 && plan.bins[0] === null ? new ByteIdTable() : null;
  const range: KeyRange = { start: 0, end: 0 };
  const keyColumns: KeyColumn[] = plan.stratify.map((name, w) => ({ name, edges: plan.bins[w] ?? null }));
  const keySlots = keyColumns.map((_, w) => w);
  try {
    await readAll(Readable.from(hashStream(path, sink)), reader, (b) => {
      table?.addBatch(b, plan.stratify.length);
      const d = b.data;
      for (let i = 0; i < b.count; i++) {
        const s = b.start[i]!;
        const e = b.end[i]!;
        let cut: { fold: number; text: string; cutStart: number; cutEnd: number } | null = null;
        let fold = 0;
        if (K > 1) {
          cut = splitFold(d, s, e, plan, nameBytes);
          const ok = cut !== null && cut.fold < K && String(cut.fold) === cut.text;
          if (ok) fold = cut!.fold;
          else {
            if (scan.badFold === null) scan.badFold = { count: 0, line: b.line[i]!, text: cut === null ? 'no fold column' : JSON.stringify(cut.text) };
            scan.badFold.count++;
            fold = -1;
          }
        }
        const h = hasher.hash(d, s, e, cut);
        scan.fingerprint.addHash(h[0]!, h[1]!);
        hashes?.add(h[0]!, h[1]!);
        scan.records++;
        if (grouped && scan.orderBreak === null) {
          const key = tupleKey(b, i, groupAt, plan.groupColumns.length);
          if (!grouped.add(key)) scan.orderBreak = { line: b.line[i]!, expected: 'the records of a group next to each other', found: `${labelOfGroup(plan, key)} again, after other groups` };
        }
        if (fold >= 0) scan.folds[fold]!++;
        if (plan.strataIndex === null) continue;
        // A plain value of a single class column is looked up by its bytes (as stage 1 does);
        // anything else, or a value not seen yet, by its canonical key.
        const byBytes = fast !== null && keyBytes(b, i, 0, range);
        let st = byBytes ? fast.lookup(d, range.start, range.end) : -1;
        if (st < 0) {
          const key = stratumKey(b, i, keySlots, keyColumns, display);
          st = plan.strataIndex.get(key) ?? -1;
          if (st < 0) {
            const label = describeStratum(plan.stratify, stratumValues(key), -1);
            const u = scan.unknown.get(label);
            if (u) u.count++;
            else scan.unknown.set(label, { count: 1, line: b.line[i]! });
            continue;
          }
          if (byBytes) fast.insert(d, range.start, range.end, st);
        }
        scan.strata[st]!++;
        if (fold >= 0) scan.foldStrata[fold * S + st]!++;
        if (spread && scan.orderBreak === null) {
          spread.add(st);
          const f = spread.failure;
          if (f) {
            const within = Number.isFinite(f.earliest) ? `between record ${f.earliest.toLocaleString('en-US')} and ${f.latest.toLocaleString('en-US')}` : 'no more of them';
            scan.orderBreak = { line: b.line[i]!, expected: `record ${f.nth.toLocaleString('en-US')} of ${plan.strataLabels[st]} ${within}`, found: `record ${f.position.toLocaleString('en-US')}` };
          }
        }
      }
    });
    scan.bytes = sink.bytes;
    scan.sha256 = sink.hash.digest('hex');
    if (table) scan.stats = gather!.done(table, plan.excludeValues);
  } catch (err) {
    if (table) gather!.drop(table);
    // A part that cannot be read (permissions, an I/O error) is a failed check, not the end of verify.
    if (!(err instanceof RowdeckError) && !describeSystemError(err)) throw err;
    scan.readError = (err instanceof RowdeckError ? err : ioError(err, display, 'reading a part')).message;
    // The parse stopped early: hash the whole file on its own so size and sha256 still count.
    try {
      const whole = await hashFile(path);
      scan.bytes = whole.bytes;
      scan.sha256 = whole.sha256;
    } catch {
      scan.bytes = 0;
      scan.sha256 = '';
    }
  }
  scan.columns = plan.format !== 'jsonl' && plan.header ? (reader.schema?.columns ?? null) : null;
  return scan;
}

/** Records in rejected.csv (a CSV with a header row), or null when the file is missing. */
async function countRejects(path: string): Promise<number | null> {
  try {
    statSync(path);
  } catch {
    return null;
  }
  const reader = new RecordReader({ format: 'csv', header: true, wanted: [], file: path, onBadRecord: 'fail' });
  let n = 0;
  await readAll(path, reader, (b) => (n += b.count));
  return n;
}

interface InputScan {
  records: number;
  rejected: number;
  perFile: number[];
  fingerprint: Fingerprint;
  errors: { file: string; message: string }[];
  headers: { file: string; columns: string[] }[];
}

/** A reader for one of the inputs given to --against: bad records are counted, not fatal. */
function createInputReader(plan: ReadPlan, file: string): RecordReader {
  return new RecordReader({
    format: plan.format,
    ...(plan.delimiter !== undefined ? { delimiter: plan.delimiter } : {}),
    header: plan.header,
    wanted: [],
    file,
    onBadRecord: 'skip',
    onReject: () => {},
  });
}

async function scanInputs(inputs: string[], plan: ReadPlan, hashes: HashList | null, progress: (done: number, records: number) => void): Promise<InputScan> {
  const res: InputScan = { records: 0, rejected: 0, perFile: [], fingerprint: new Fingerprint(), errors: [], headers: [] };
  // Small inputs are read whole, a few ahead (thousands of shards each took their trips to the thread pool).
  const ahead = new ReadAhead(inputs, READ_AHEAD_MAX_BYTES);
  for (let k = 0; k < inputs.length; k++) {
    const path = inputs[k]!;
    const file = nameInput(path);
    if (path !== '-') {
      try {
        statSync(path);
      } catch (err) {
        throw ioError(err, path, 'reading');
      }
    }
    const reader = createInputReader(plan, file);
    const whole = await ahead.take(k);
    let n = 0;
    try {
      await readAll(whole ?? path, reader, (b) => {
        for (let i = 0; i < b.count; i++) {
          const h = recordHash(b.data, b.start[i]!, b.end[i]!);
          res.fingerprint.addHash(h[0]!, h[1]!);
          hashes?.add(h[0]!, h[1]!);
        }
        n += b.count;
      });
    } catch (err) {
      if (!(err instanceof RowdeckError)) throw err;
      if (err.code === 'RDK_INPUT_NOT_FOUND') throw err;
      res.errors.push({ file, message: err.message });
    }
    if (plan.format !== 'jsonl' && plan.header && reader.schema) res.headers.push({ file, columns: reader.schema.columns });
    res.records += n;
    res.rejected += reader.stats.rejected;
    res.perFile.push(n);
    progress(k + 1, res.records);
  }
  return res;
}

/**
 * The records that differ, found from the two sorted hash lists, then located (file:line and
 * text) by reading the inputs and parts once more. Only runs when a check already failed.
 */
async function listDifferences(inHashes: HashList, outHashes: HashList, inputs: string[], parts: PartRecord[], dir: string, plan: ReadPlan): Promise<NonNullable<VerifyAgainst['differences']>> {
  const a = inHashes.sorted();
  const b = outHashes.sorted();
  const missing = new Map<string, { left: number; input: number; output: number }>();
  const extra = new Map<string, { left: number; input: number; output: number }>();
  let nMissing = 0;
  let nExtra = 0;
  let i = 0;
  let j = 0;
  const na = a.big.length;
  const nb = b.big.length;
  while (i < na || j < nb) {
    const va = i < na ? a.big[i]! : null;
    const vb = j < nb ? b.big[j]! : null;
    const v = va === null ? vb! : vb === null ? va : va < vb ? va : vb;
    const i0 = i;
    const j0 = j;
    while (i < na && a.big[i] === v) i++;
    while (j < nb && b.big[j] === v) j++;
    const ca = i - i0;
    const cb = j - j0;
    if (ca === cb) continue;
    const words = ca > 0 ? a.words : b.words;
    const at = ca > 0 ? i0 : j0;
    const key = hashKey(words[2 * at + 1]!, words[2 * at]!);
    if (ca > cb) {
      nMissing += ca - cb;
      if (missing.size < DIFF_TRACK_LIMIT) missing.set(key, { left: ca - cb, input: ca, output: cb });
    } else {
      nExtra += cb - ca;
      if (extra.size < DIFF_TRACK_LIMIT) extra.set(key, { left: cb - ca, input: ca, output: cb });
    }
  }
  const listed: RecordDifference[] = [];
  const hasher = new RecordHasher();
  if (missing.size > 0) {
    let found = 0;
    for (const path of inputs) {
      if (found >= DIFF_LIST_LIMIT) break;
      // Standard input or a pipe was read once already; its records can be counted but not listed.
      if (isStreamInput(path)) continue;
      const file = nameInput(path);
      const reader = createInputReader(plan, file);
      try {
        await readAll(path, reader, (bt) => {
          for (let r = 0; r < bt.count && found < DIFF_LIST_LIMIT; r++) {
            const h = recordHash(bt.data, bt.start[r]!, bt.end[r]!);
            const e = missing.get(hashKey(h[0]!, h[1]!));
            if (!e || e.left === 0) continue;
            e.left--;
            found++;
            listed.push({ kind: 'missing', file, line: bt.line[r]!, record: hasher.text(bt.data, bt.start[r]!, bt.end[r]!, null), copies: { input: e.input, output: e.output } });
          }
        });
      } catch (err) {
        if (!(err instanceof RowdeckError)) throw err;
      }
    }
  }
  if (extra.size > 0) {
    let found = 0;
    const nameBytes = Buffer.from(plan.foldColumn !== null ? `${JSON.stringify(plan.foldColumn)}:` : '', 'utf8');
    for (const p of parts) {
      if (found >= DIFF_LIST_LIMIT) break;
      const reader = new RecordReader({
        format: plan.format,
        ...(plan.delimiter !== undefined ? { delimiter: plan.delimiter } : {}),
        header: plan.header,
        wanted: [],
        file: p.path,
        onBadRecord: 'fail',
      });
      try {
        await readAll(join(dir, p.path), reader, (bt) => {
          for (let r = 0; r < bt.count && found < DIFF_LIST_LIMIT; r++) {
            const s = bt.start[r]!;
            const e = bt.end[r]!;
            const cut = plan.folds > 1 ? splitFold(bt.data, s, e, plan, nameBytes) : null;
            const h = hasher.hash(bt.data, s, e, cut);
            const x = extra.get(hashKey(h[0]!, h[1]!));
            if (!x || x.left === 0) continue;
            x.left--;
            found++;
            listed.push({ kind: 'extra', file: p.path, line: bt.line[r]!, record: hasher.text(bt.data, s, e, cut), copies: { input: x.input, output: x.output } });
          }
        });
      } catch (err) {
        if (!(err instanceof RowdeckError)) throw err;
      }
    }
  }
  return { missing: nMissing, extra: nExtra, listed, listing: 'listed' };
}
