/**
 * Stage 1, scatter: stream the inputs, give every record its key, and append it to the spill
 * bucket of its key range. Counts records per (bucket, stratum) for the plan, and collects what
 * group and hash modes need. Runs on the main thread: it is bound by reading and splitting, and
 * the records must be read in order anyway.
 */
import { FieldKind, type BadRecordPolicy, type InputFormat, type InputSchema, type RecordBatch, type RejectedRecord } from '../io/batch.js';
import { Fingerprint, hashBytes, hashWords3, type Secret } from '../core/hash.js';
import { decodeCsvQuoted, fieldText } from '../io/reader.js';
import { binLabel, binOf, parseBinValue } from './quantiles.js';
import { readRecords } from '../io/input.js';
import { RowdeckError } from '../errors.js';
import { BucketWriter } from './spill.js';

/** Stratum key of a missing value. Cannot collide with text: keys are latin1 renderings of UTF-8 bytes. */
export const MISSING_KEY = '\uffff';
/** Separator between the values of a multi-column stratum key (outside the latin1 range). */
export const TUPLE_SEP = '\u0100';
/** More strata than this is almost always a mistake (an ID column given to --stratify). */
export const MAX_STRATA = 100_000;

export interface ScatterOptions {
  inputs: string[];
  format: InputFormat;
  delimiter: string | undefined;
  header: boolean;
  onBadRecord: BadRecordPolicy;
  onReject: ((r: RejectedRecord) => void) | undefined;
  stratify: string[];
  /** Per stratify column: quantile bin edges, or null for plain values. */
  bins?: (number[] | null)[];
  key: string[];
  group: string | null;
  secret: Secret;
  spillDir: string;
  task: number;
  bits: number;
  bufferBytes: number;
  onProgress?: (bytes: number, records: number) => void;
}

export interface GroupEntry {
  hi: number;
  lo: number;
  size: number;
  /** Records per local stratum id. */
  strata: Map<number, number>;
}

export interface ScatterResult {
  schema: InputSchema;
  /** Local stratum id -> canonical stratum key. */
  strata: string[];
  /** `bucketCounts[stratum][bucket]`: records. */
  bucketCounts: Float64Array[];
  bucketBytes: Float64Array;
  bucketPaths: string[];
  inputs: { path: string; bytes: number; records: number; rejected: number }[];
  records: number;
  rejected: number;
  fingerprint: Fingerprint;
  groups: GroupEntry[] | null;
}

/** Canonical text of one wanted field: the latin1 rendering of its decoded UTF-8 bytes. */
export function fieldKey(b: RecordBatch, i: number, w: number): string {
  const k = i * b.wanted + w;
  const s = b.fieldStart[k]!;
  const e = b.fieldEnd[k]!;
  switch (b.fieldKind[k]) {
    case FieldKind.Plain:
      return s === e ? MISSING_KEY : b.data.toString('latin1', s, e);
    case FieldKind.CsvQuoted:
      return Buffer.from(decodeCsvQuoted(b.data, s, e), 'utf8').toString('latin1');
    case FieldKind.JsonString: {
      const v = JSON.parse(b.data.toString('utf8', s, e)) as string;
      return Buffer.from(v, 'utf8').toString('latin1');
    }
    default:
      return MISSING_KEY;
  }
}

/** Human form of a canonical stratum key: values decoded, missing shown as null. */
export function stratumValues(key: string): (string | null)[] {
  return key.split(TUPLE_SEP).map((v) => (v === MISSING_KEY ? null : Buffer.from(v, 'latin1').toString('utf8')));
}

/**
 * Byte-keyed lookup for the common case (one stratify column, plain field): finds a stratum id
 * from the field's bytes without making a string per record.
 */
class ByteIdTable {
  #mask = 255;
  #hashes = new Int32Array(256);
  #ids = new Int32Array(256).fill(-1);
  #keys: (Buffer | undefined)[] = new Array(256);
  #size = 0;

  static hash(d: Buffer, s: number, e: number): number {
    let h = 0x811c9dc5 | 0;
    for (let i = s; i < e; i++) h = Math.imul(h ^ d[i]!, 0x01000193);
    return h;
  }

  find(d: Buffer, s: number, e: number, h: number): number {
    const len = e - s;
    for (let slot = h & this.#mask; ; slot = (slot + 1) & this.#mask) {
      const id = this.#ids[slot]!;
      if (id < 0) return -1;
      if (this.#hashes[slot] !== h) continue;
      const k = this.#keys[slot]!;
      if (k.length !== len) continue;
      let same = true;
      for (let i = 0; i < len; i++) {
        if (k[i] !== d[s + i]) {
          same = false;
          break;
        }
      }
      if (same) return id;
    }
  }

  add(d: Buffer, s: number, e: number, h: number, id: number): void {
    if ((this.#size + 1) * 2 > this.#mask) this.#grow();
    let slot = h & this.#mask;
    while (this.#ids[slot]! >= 0) slot = (slot + 1) & this.#mask;
    this.#ids[slot] = id;
    this.#hashes[slot] = h;
    this.#keys[slot] = Buffer.from(d.subarray(s, e));
    this.#size++;
  }

  #grow(): void {
    const ids = this.#ids;
    const hashes = this.#hashes;
    const keys = this.#keys;
    const cap = (this.#mask + 1) * 2;
    this.#mask = cap - 1;
    this.#ids = new Int32Array(cap).fill(-1);
    this.#hashes = new Int32Array(cap);
    this.#keys = new Array(cap);
    for (let slot = 0; slot < ids.length; slot++) {
      if (ids[slot]! < 0) continue;
      let t = hashes[slot]! & this.#mask;
      while (this.#ids[t]! >= 0) t = (t + 1) & this.#mask;
      this.#ids[t] = ids[slot]!;
      this.#hashes[t] = hashes[slot]!;
      this.#keys[t] = keys[slot];
    }
  }
}

export async function scatter(o: ScatterOptions): Promise<ScatterResult> {
  const nStrat = o.stratify.length;
  const nKey = o.key.length;
  const groupSlot = o.group !== null ? nStrat + nKey : -1;
  const wanted = [...o.stratify, ...o.key, ...(o.group !== null ? [o.group] : [])];
  const B = 2 ** o.bits;
  const strataIds = new Map<string, number>();
  const strata: string[] = [];
  const bucketCounts: Float64Array[] = [];
  const fp = new Fingerprint();
  const writer = new BucketWriter(o.spillDir, o.task, B, o.bufferBytes, fp);
  const groups = o.group !== null ? new Map<string, GroupEntry>() : null;
  const inputs = o.inputs.map((path) => ({ path, bytes: 0, records: 0, rejected: 0 }));
  let schema: InputSchema | null = null;
  let records = 0;
  let bytesSeen = 0;
  const keyBuf: Buffer[] = [];
  const shift = 32 - o.bits;

  const fast = new ByteIdTable();
  const bins = o.bins ?? [];
  const hasBins = bins.some((x) => x !== null && x !== undefined);
  const partKey = (b: RecordBatch, i: number, w: number): string => {
    const edges = bins[w];
    if (!edges) return fieldKey(b, i, w);
    const v = parseBinValue(fieldText(b, i, w), o.stratify[w]!, o.inputs[currentInput]!, b.line[i]!);
    return v === null ? MISSING_KEY : binLabel(edges, binOf(edges, v));
  };
  let currentInput = 0;
  const stratumOf = (b: RecordBatch, i: number): number => {
    if (nStrat === 0) return strata.length ? 0 : newStratum('');
    if (nStrat === 1 && !hasBins && b.fieldKind[i * b.wanted] === FieldKind.Plain) {
      // Plain field: look its bytes up directly; same key as fieldKey() would build.
      const fs = b.fieldStart[i * b.wanted]!;
      const fe = b.fieldEnd[i * b.wanted]!;
      if (fe > fs && fe - fs <= 64) {
        const h = ByteIdTable.hash(b.data, fs, fe);
        let id = fast.find(b.data, fs, fe, h);
        if (id < 0) {
          id = strataIds.get(b.data.toString('latin1', fs, fe)) ?? newStratum(b.data.toString('latin1', fs, fe));
          fast.add(b.data, fs, fe, h, id);
        }
        return id;
      }
    }
    let k = partKey(b, i, 0);
    for (let w = 1; w < nStrat; w++) k += TUPLE_SEP + partKey(b, i, w);
    return strataIds.get(k) ?? newStratum(k);
  };
  const newStratum = (k: string): number => {
    {
      const id = strata.length;
      if (id >= MAX_STRATA) {
        throw new RowdeckError(
          'ERR_OPTION',
          `--stratify ${o.stratify.join(',')} has more than ${MAX_STRATA} distinct values. Stratify on a class column; for a numeric column use NAME:bins=Q; to keep records of one entity together use --group.`,
          { column: o.stratify.join(',') },
        );
      }
      strataIds.set(k, id);
      strata.push(k);
      bucketCounts.push(new Float64Array(B));
      return id;
    }
  };

  try {
    for await (const { input, batch, schema: sch, stats } of readRecords(o.inputs, {
      format: o.format,
      ...(o.delimiter !== undefined ? { delimiter: o.delimiter } : {}),
      header: o.header,
      wanted,
      onBadRecord: o.onBadRecord,
      onReject: o.onReject,
    })) {
      schema ??= sch;
      currentInput = input;
      const d = batch.data;
      const n = batch.count;
      if (n > 0) writer.stage(d, batch.start[0]!, batch.next[n - 1]!);
      for (let i = 0; i < n; i++) {
        const s = batch.start[i]!;
        const e = batch.end[i]!;
        const term = batch.next[i]! - e;
        const offset = batch.offset[i]!;
        let hi: number;
        let lo: number;
        if (groupSlot >= 0 || nKey > 0) {
          // Keys from column values: equal values, equal keys, wherever the record sits.
          let text = '';
          if (groupSlot >= 0) text = fieldKey(batch, i, groupSlot);
          else for (let w = 0; w < nKey; w++) text += (w ? TUPLE_SEP : '') + fieldKey(batch, i, nStrat + w);
          const kb = (keyBuf[0] ??= Buffer.allocUnsafe(4096));
          const len = kb.write(text, 0, 'latin1');
          const h = len < 4096 ? hashBytes(o.secret, kb, 0, len) : hashBytes(o.secret, Buffer.from(text, 'latin1'), 0, Buffer.byteLength(text, 'latin1'));
          hi = h[0]!;
          lo = h[1]!;
        } else {
          const h = hashWords3(o.secret, input, Math.floor(offset / 0x100000000), offset >>> 0);
          hi = h[0]!;
          lo = h[1]!;
        }
        const st = stratumOf(batch, i);
        const bucket = o.bits === 0 ? 0 : hi >>> shift;
        writer.append(bucket, hi, lo, offset, input, st, d, s, e, term);
        bucketCounts[st]![bucket]!++;
        if (groups) {
          const gk = `${hi}:${lo}`;
          let g = groups.get(gk);
          if (!g) groups.set(gk, (g = { hi, lo, size: 0, strata: new Map() }));
          g.size++;
          g.strata.set(st, (g.strata.get(st) ?? 0) + 1);
        }
      }
      records += n;
      inputs[input]!.records += n;
      inputs[input]!.bytes = stats.bytes;
      inputs[input]!.rejected = stats.rejected;
      bytesSeen = inputs.reduce((a, x) => a + x.bytes, 0);
      o.onProgress?.(bytesSeen, records);
    }
    writer.close();
  } catch (err) {
    writer.abandon();
    throw err;
  }
  if (!schema) throw new RowdeckError('ERR_INPUT_EMPTY', `${o.inputs.join(', ')}: no records to shuffle.`, { file: o.inputs[0] });
  return {
    schema,
    strata,
    bucketCounts,
    bucketBytes: writer.bytes,
    bucketPaths: writer.paths,
    inputs,
    records,
    rejected: inputs.reduce((a, x) => a + x.rejected, 0),
    fingerprint: fp,
    groups: groups ? [...groups.values()] : null,
  };
}
