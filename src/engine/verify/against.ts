/**
 * `verify --against`: the inputs read again and checked to hold exactly the output's records
 * (counts per input, the rejected ones, fingerprints); where they differ, the records that do,
 * found from the sorted 64-bit hashes of both sides and located (file:line and text) by a
 * second read. Memory stays bounded: one hash per record, and only up to DIFF_RECORD_LIMIT.
 */
import { statSync } from 'node:fs';
import { join } from 'node:path';
import { Fingerprint } from '../../core/hash.js';
import { RowdeckError, ioError } from '../../errors.js';
import { isStreamInput, nameInput, READ_AHEAD_MAX_BYTES, ReadAhead } from '../../io/input.js';
import { RecordReader } from '../../io/reader.js';
import type { VerifyProgress } from '../../options.js';
import { misorderedInputs } from '../input-order.js';
import type { Manifest, PartRecord } from '../manifest.js';
import type { OutputRead } from './checks.js';
import type { ReadPlan } from './read-plan.js';
import { DIFF_RECORD_LIMIT, foldNameBytes, hashKey, HashList, readAll, recordHash, RecordHasher, splitFold } from './records.js';
import { Findings, same, type RecordDifference, type VerifyAgainst } from './report.js';

/** Records listed per kind (missing, extra) when the input and the output differ. */
export const DIFF_LIST_LIMIT = 20;
/** Distinct differing records remembered for the listing (the counts are always complete). */
const DIFF_TRACK_LIMIT = 10_000;

/** Progress of the step, without its time (the caller adds it). */
export type AgainstProgress = (e: Omit<VerifyProgress, 'elapsedMs'>) => void;

/** What the inputs hold against the output, and whether they were given in another order than the manifest's. */
export interface AgainstResult {
  findings: Findings;
  against: VerifyAgainst;
  misordered: { expected: string; found: string } | null;
}

/**
 * Reads `inputs` and checks them against the manifest and against the output as read. `outHashes`:
 * every output record's hash, or null when there are too many records to list differences.
 */
export async function checkAgainst(inputs: string[], dir: string, m: Manifest, plan: ReadPlan, output: OutputRead, outHashes: HashList | null, progress: AgainstProgress): Promise<AgainstResult> {
  const out = new Findings();
  const parts = m.output.parts;
  const allRead = output.allRead;
  if (inputs.length === 0) throw new RowdeckError('RDK_MISSING_ARGUMENT', 'verify: against needs at least one input file.');
  const inHashes = outHashes !== null ? new HashList() : null;
  // Bad records are counted, not fatal: the manifest says how many the run refused.
  const read = await scanInputs(inputs, plan, inHashes, (done, records) =>
    progress({ stage: 'inputs', done, total: inputs.length, records }),
  );
  const A = '(inputs)';
  for (const e of read.errors) out.judge(e.file, 'readable', [{ expected: 'records the reader accepts', found: e.message }]);
  for (const h of read.headers) out.judge(h.file, 'header', same(JSON.stringify(plan.columns), JSON.stringify(h.columns)));
  const misordered = misorderedInputs(inputs, m.input.files, read.perFile);
  if (misordered) {
    out.judge(A, 'input order', [{ item: 'the order matters: give the inputs in the order the manifest lists them', expected: misordered.expected, found: misordered.found }]);
  } else if (inputs.length === m.input.files.length) {
    read.perFile.forEach((n, k) => out.judge(nameInput(inputs[k]!), 'records', same(m.input.files[k]!.records, n)));
  } else {
    out.judge(A, 'records', same(m.input.records, read.records), `${inputs.length} input(s) given, the manifest lists ${m.input.files.length}`);
  }
  out.judge(A, 'rejected', same(m.input.rejected, read.rejected));
  const fp = read.fingerprint.toHex();
  out.judge(A, 'input fingerprint', same(m.input.fingerprint, fp));
  out.judge(A, 'output fingerprint', allRead ? same(fp, output.fingerprint) : [{ expected: fp, found: `${output.fingerprint} (some parts could not be read)` }]);
  const against: VerifyAgainst = { inputs, records: read.records, rejected: read.rejected, fingerprint: fp, differences: null };
  const differs = fp !== output.fingerprint || read.records !== output.records || !allRead;
  if (differs) {
    // Listed from what could be read: a missing part's records show up as missing ones.
    if (inHashes && outHashes && !inHashes.overflow && !outHashes.overflow) {
      progress({ stage: 'differences', done: 0, total: 1, records: 0 });
      against.differences = await listDifferences(inHashes, outHashes, inputs, parts, dir, plan);
    } else {
      const diff = read.records - output.records;
      against.differences = { missing: Math.max(0, diff), extra: Math.max(0, -diff), listed: [], listing: 'counts only' };
      out.skip(A, 'differences', `more than ${DIFF_RECORD_LIMIT.toLocaleString('en-US')} records: compare the fingerprints and counts`);
    }
    const d = against.differences;
    if (d.listing === 'listed') {
      out.judge(A, 'differences', [
        ...(d.missing > 0 ? [{ item: 'records missing from the output', expected: 0, found: d.missing }] : []),
        ...(d.extra > 0 ? [{ item: 'records not in the inputs', expected: 0, found: d.extra }] : []),
      ]);
    }
  }
  return { findings: out, against, misordered };
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
    const nameBytes = foldNameBytes(plan);
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
