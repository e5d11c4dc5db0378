/**
 * One part read: its bytes hashed (sha256) as they stream past, and its records counted by
 * class, fold and class within fold, fingerprinted, checked for the promised order and (with
 * statistics in the manifest) summarised, in a single read. Also the count of rejected.csv.
 */
import { createHash } from 'node:crypto';
import { closeSync, openSync, statSync } from 'node:fs';
import { Readable } from 'node:stream';
import { Fingerprint } from '../../core/hash.js';
import type { ColumnSummary } from '../../core/stats.js';
import { ByteIdTable } from '../../core/byte-table.js';
import { SpreadCheck } from '../../core/spread.js';
import { describeStratum, describeValues, keyBytes, stratumKey, stratumValues, tupleKey, type KeyColumn, type KeyRange } from '../../core/strata.js';
import { RowdeckError, ioError } from '../../errors.js';
import { describeSystemError } from '../../io/os-errors.js';
import { RecordReader } from '../../io/reader.js';
import type { PartStatsGather } from '../part-stats.js';
import type { ReadPlan } from './read-plan.js';
import { foldNameBytes, hashFile, hashStream, readAll, RecordHasher, splitFold, type HashList } from './records.js';

/** What one part holds, as read from its file. */
export interface PartScan {
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

export async function scanPart(path: string, display: string, plan: ReadPlan, hashes: HashList | null, gather: PartStatsGather | null = null, classCounts: number[] | null = null): Promise<PartScan> {
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
  // A JSON Lines part is read with the input's keys, as the shuffle read the input: a part whose
  // first record lacks a key (an optional field) still has that column.
  if (plan.format === 'jsonl') reader.adoptSchema({ format: 'jsonl', columns: plan.columns, headerBytes: null, lineEnding: '\n', delimiter: 0 });
  const hasher = new RecordHasher();
  const nameBytes = foldNameBytes(plan);
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
export async function countRejects(path: string): Promise<number | null> {
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

