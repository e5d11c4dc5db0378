/**
 * What the CSV/TSV and the JSON Lines record readers share (csv-records.ts, jsonl-records.ts):
 * the options, the counts, where the next record starts (offset, line), the partial record
 * carried into the next push, the batch's output arrays, and which columns the wanted fields are.
 * push() and end() are here; each format reads the records of the bytes they hand it.
 * No fs or stream imports here; src/io/input.ts adapts files.
 */

import type { BadRecordPolicy, InputFormat, InputSchema, RecordBatch, RejectedRecord } from './batch.js';
import { RowdeckError, where } from '../errors.js';
import type { RowdeckErrorCode } from '../errors.js';
import { checkNotHeaderOnly, unknownColumn } from './fields.js';
import { rejectReason } from './reject-reason.js';

const LF = 0x0a;
const CR = 0x0d;
const QUOTE = 0x22;


export const MAX_RECORD_BYTES = 64 * 1024 * 1024;
/** Rejected records are handed over cut to this many bytes. */
export const REJECT_BYTES_CAP = 64 * 1024;

export interface RecordReaderOptions {
  format: InputFormat;
  /** One character (one byte); default ',' for csv, '\t' for tsv. */
  delimiter?: string;
  /** csv/tsv: the first record is the header; false names the columns column_1…column_N. */
  header: boolean;
  /** Column names whose fields are located in every record. */
  wanted: string[];
  /** Name used in messages ('<stdin>' for -). */
  file: string;
  onBadRecord: BadRecordPolicy;
  /** Called for each refused record when onBadRecord is not 'fail'. */
  onReject?: (r: RejectedRecord) => void;
  /** For the 2nd…nth input: the header must equal this. */
  expectedColumns?: string[];
  /** Name of the input `expectedColumns` came from, for the mismatch message. */
  expectedFrom?: string;
  /** A quoted field still open after this many bytes is reported as unterminated (default MAX_RECORD_BYTES). */
  maxRecordBytes?: number;
  /**
   * JSON Lines: a top-level key no record may have (the fold column the output adds). A record
   * with it stops the read, whatever `onBadRecord` says: its value would be shadowed.
   */
  refuseKey?: string;
}

/** What a reader has read so far. */
export interface ReaderCounts {
  records: number;
  rejected: number;
  bytes: number;
  lines: number;
}

/**
 * The state of one read. The format's subclass reads records (parseFrom, parseRecords) into the
 * output arrays through addRecord-like writes and hands them back with keep().
 */
export abstract class ReaderState {
  readonly stats: ReaderCounts = { records: 0, rejected: 0, bytes: 0, lines: 0 };

  protected readonly opts: RecordReaderOptions;
  protected readonly delim: number;
  protected readonly W: number;
  protected sch: InputSchema | null = null;
  /** Expected field count per record (CSV/TSV); 0 until the first record is known. */
  protected ncols = 0;
  /** For each wanted slot, the earlier slot with the same name, or -1. */
  protected dupOf = new Int32Array(0);
  /** Column index of each wanted field. */
  protected wcol = new Int32Array(0);
  /** markPrefix[k]: how many of delimiters 1..k bound a wanted field (see countDelims). */
  protected markPrefix = new Int32Array(1);
  /** nextMark[c]: the first delimiter number above c that bounds a wanted field. */
  protected nextMark = new Int32Array(1).fill(0x7fffffff);
  /** Positions of the delimiters of the record being read, by number (1-based). */
  protected dpos = new Int32Array(8);

  // Bytes of a partial record carried into the next push. Two buffers alternate so the carried
  // tail never overwrites the batch being returned.
  protected carry: [Buffer, Buffer] = [Buffer.alloc(0), Buffer.alloc(0)];
  protected cur: 0 | 1 = 0;
  protected carryLen = 0;
  /** Input offset of the first byte of the data being parsed (= of carry[0]). */
  protected base = 0;
  /** Physical line on which the next record starts. */
  protected line = 1;
  protected bomDone = false;
  protected headerDone = false;
  /** Reading from the middle of an input with an adopted schema (see adoptSchema). */
  protected resumed = false;
  protected ended = false;
  protected lastByte = -1;
  protected lineEnding: '\n' | '\r\n' | null = null;

  // Output arrays, grown on demand and reused between batches.
  protected cap = 0;
  protected st = new Uint32Array(0);
  protected en = new Uint32Array(0);
  protected nx = new Uint32Array(0);
  protected off = new Float64Array(0);
  protected ln = new Float64Array(0);
  protected fS = new Uint32Array(0);
  protected fE = new Uint32Array(0);
  protected fK = new Uint8Array(0);

  /**
   * `recycle`: a reader done with (its last batch used up) whose output arrays this one takes
   * over, with the same number of wanted fields. Inputs of ~100 KB read one after another each
   * made and grew these arrays afresh: ~0.3 ms an input, most of it first touches of new memory.
   */
  constructor(opts: RecordReaderOptions, recycle?: ReaderState) {
    this.opts = opts;
    const d = opts.delimiter ?? (opts.format === 'tsv' ? '\t' : ',');
    const db = Buffer.from(d, 'utf8');
    if (db.length !== 1 || db[0] === QUOTE || db[0] === LF || db[0] === CR) {
      throw new RowdeckError('RDK_OPTION', `Invalid option "delimiter": expected one single-byte character other than a quote or a line end, got ${JSON.stringify(d)}`, {});
    }
    this.delim = db[0]!;
    this.W = opts.wanted.length;
    if (recycle && recycle.W === this.W && recycle.cap > 0) {
      ({ cap: this.cap, st: this.st, en: this.en, nx: this.nx, off: this.off, ln: this.ln, fS: this.fS, fE: this.fE, fK: this.fK } = recycle);
      recycle.cap = 0;
      recycle.st = recycle.en = recycle.nx = recycle.fS = recycle.fE = new Uint32Array(0);
      recycle.off = recycle.ln = new Float64Array(0);
      recycle.fK = new Uint8Array(0);
    } else this.grow(1024);
  }

  get schema(): InputSchema | null {
    return this.sch;
  }

  /** Input offset where the next record starts: everything before it has been returned or refused. */
  get resumeOffset(): number {
    return this.base;
  }

  /** Physical line on which the next record starts. */
  get nextLine(): number {
    return this.line;
  }

  /**
   * Takes the schema another reader learned from the input's start, so this one can read from
   * the middle of the input: no BOM or header is looked for, and `end()` does not ask for a
   * first record. Used with `resumeAt` (push from an offset) or `parseBlock` (parallel reading).
   */
  adoptSchema(schema: InputSchema): void {
    this.setColumns(schema.columns);
    this.ncols = schema.columns.length;
    this.lineEnding = schema.lineEnding;
    this.sch = schema;
    this.bomDone = true;
    this.headerDone = true;
    this.resumed = true;
  }

  /** Starts reading at input offset `offset`, a record start, on physical line `line` (push on from there). */
  resumeAt(offset: number, line: number): void {
    this.reset(offset, line);
  }

  /**
   * Reads the records of `d[pos..]` as a self-contained range: `d[0]` is at input offset
   * `baseOffset` and `d[pos]` is a record start on line 1 (callers shift line numbers later).
   * Complete records come back as one batch; with `atEnd` false, a partial record at the end is
   * left out. Needs `adoptSchema` first. The batch is valid until the next call.
   */
  parseBlock(d: Buffer, pos: number, atEnd: boolean, baseOffset: number): RecordBatch | null {
    if (!this.resumed) throw new RowdeckError('RDK_INTERNAL', 'RecordReader.parseBlock() before adoptSchema()');
    this.reset(baseOffset, 1);
    return this.parseRecords(d, pos, atEnd);
  }

  /** Starts over at input offset `base`, on line `line`, with nothing carried (a format adds its own). */
  protected reset(base: number, line: number): void {
    this.carryLen = 0;
    this.ended = false;
    this.base = base;
    this.line = line;
  }

  push(chunk: Buffer): RecordBatch | null {
    if (this.ended) throw new RowdeckError('RDK_INTERNAL', 'RecordReader.push() after end()');
    if (chunk.length === 0) return null;
    this.stats.bytes += chunk.length;
    this.lastByte = chunk[chunk.length - 1]!;
    if (this.takesChunk(chunk)) return null;
    let data: Buffer;
    if (this.carryLen === 0) data = chunk;
    else {
      const need = this.carryLen + chunk.length;
      let buf = this.carry[this.cur];
      if (buf.length < need) {
        const bigger = Buffer.allocUnsafe(Math.max(need, buf.length * 2));
        buf.copy(bigger, 0, 0, this.carryLen);
        this.carry[this.cur] = buf = bigger;
      }
      chunk.copy(buf, this.carryLen);
      data = buf.subarray(0, need);
    }
    return this.parse(data, false);
  }

  end(): RecordBatch | null {
    if (this.ended) return null;
    this.beforeEnd();
    const batch = this.parse(this.carry[this.cur].subarray(0, this.carryLen), true);
    this.ended = true;
    this.stats.lines = this.stats.bytes === 0 ? 0 : this.lastByte === LF ? this.line - 1 : this.line;
    const { file } = this.opts;
    if (this.resumed) return batch;
    if (!this.sch) {
      const why = this.stats.rejected > 0 ? ` (${this.stats.rejected} refused as bad)` : this.stats.bytes > 0 ? ' (only blank lines)' : '';
      throw new RowdeckError('RDK_INPUT_EMPTY', `${file}: the input holds no records${why}. Check the path, or that the file was fully written.`, { file });
    }
    if (this.stats.records + this.stats.rejected === 0) checkNotHeaderOnly(this.opts, 0);
    return batch;
  }

  // --- what each format does ---

  /** The records of `d` from `pos` (past a BOM), going on with whatever earlier pushes left open. */
  protected abstract parseFrom(d: Buffer, pos: number, atEnd: boolean): RecordBatch | null;

  /** The records of `d` from `pos`, a record start, with nothing open before it (parseBlock). */
  protected abstract parseRecords(d: Buffer, pos: number, atEnd: boolean): RecordBatch | null;

  /** True when the format takes a pushed chunk itself instead of reading records from it. */
  protected takesChunk(_chunk: Buffer): boolean {
    return false;
  }

  /** At end(), before the last bytes are read: what the format must settle first (may throw). */
  protected beforeEnd(): void {}

  // --- shared ---

  protected grow(min: number): void {
    let cap = Math.max(this.cap * 2, min, 1024);
    const W = this.W;
    const st = new Uint32Array(cap), en = new Uint32Array(cap), nx = new Uint32Array(cap);
    const off = new Float64Array(cap), ln = new Float64Array(cap);
    const fS = new Uint32Array(cap * W), fE = new Uint32Array(cap * W), fK = new Uint8Array(cap * W);
    st.set(this.st); en.set(this.en); nx.set(this.nx); off.set(this.off); ln.set(this.ln);
    fS.set(this.fS); fE.set(this.fE); fK.set(this.fK);
    this.st = st; this.en = en; this.nx = nx; this.off = off; this.ln = ln;
    this.fS = fS; this.fE = fE; this.fK = fK;
    this.cap = cap;
  }

  protected parse(d: Buffer, atEnd: boolean): RecordBatch | null {
    const n = d.length;
    let pos = 0;
    if (!this.bomDone) {
      // Wait for three bytes: a chunk may end inside the BOM.
      if (n < 3 && !atEnd && d[0] === 0xef && (n < 2 || d[1] === 0xbb)) return this.keep(d, 0, 0);
      if (n >= 3 && d[0] === 0xef && d[1] === 0xbb && d[2] === 0xbf) pos = 3;
      this.bomDone = true;
    }
    return this.parseFrom(d, pos, atEnd);
  }

  /** Keeps `d[pos..]` as the carried partial record, returns the batch of `count` records. */
  protected keep(d: Buffer, pos: number, count: number): RecordBatch | null {
    const n = d.length;
    const len = n - pos;
    const own = this.carry[this.cur];
    if (len > 0 && pos === 0 && d.buffer === own.buffer && d.byteOffset === own.byteOffset) {
      // The whole data is the carried record, already in place (no batch refers to it).
      this.carryLen = len;
    } else if (len > 0) {
      const other = (1 - this.cur) as 0 | 1;
      let buf = this.carry[other];
      if (buf.length < len) this.carry[other] = buf = Buffer.allocUnsafe(Math.max(len * 2, 64 * 1024));
      d.copy(buf, 0, pos, n);
      this.cur = other;
      this.carryLen = len;
    } else this.carryLen = 0;
    this.base += pos;
    if (count === 0) return null;
    return {
      data: d,
      count,
      start: this.st.subarray(0, count),
      end: this.en.subarray(0, count),
      next: this.nx.subarray(0, count),
      offset: this.off.subarray(0, count),
      line: this.ln.subarray(0, count),
      wanted: this.W,
      fieldStart: this.fS.subarray(0, count * this.W),
      fieldEnd: this.fE.subarray(0, count * this.W),
      fieldKind: this.fK.subarray(0, count * this.W),
    };
  }

  /** Reports a bad record: throws under 'fail', else counts it and hands it to onReject. */
  protected reject(code: RowdeckErrorCode, line: number, column: number, msg: string, d: Buffer, s: number, e: number): void {
    const { file, onBadRecord, onReject } = this.opts;
    if (onBadRecord === 'fail') {
      throw new RowdeckError(code, `${where(file, line, column)}: ${msg}`, { file, line, column });
    }
    this.stats.rejected++;
    onReject?.({ file, line, code, reason: rejectReason(msg), bytes: Buffer.from(d.subarray(s, Math.min(e, s + REJECT_BYTES_CAP))) });
  }

  protected checkExpected(columns: string[]): void {
    const exp = this.opts.expectedColumns;
    if (!exp) return;
    const len = Math.max(exp.length, columns.length);
    for (let f = 0; f < len; f++) {
      if (exp[f] !== columns[f]) {
        const { file } = this.opts;
        const from = this.opts.expectedFrom ?? 'the first input';
        throw new RowdeckError('RDK_HEADER_MISMATCH',
          `${where(file, this.opts.format === 'jsonl' ? undefined : 1, f + 1)}: columns differ from ${from}: column ${f + 1} is ${columns[f] === undefined ? 'missing' : `"${columns[f]}"`}, ${from} has ${exp[f] === undefined ? 'no such column' : `"${exp[f]}"`}. All inputs must have the same columns in the same order.`,
          { file, line: 1, column: f + 1, expectedFrom: from, expected: exp, found: columns });
      }
    }
  }

  /** Maps wanted names to column indices; unknown names fail with the closest suggestion. */
  protected setColumns(columns: string[]): void {
    const N = columns.length;
    const { wanted, file } = this.opts;
    for (const name of wanted) if (!columns.includes(name)) throw unknownColumn(name, columns, file);
    // A column may be wanted twice (say, as stratum and as key): later copies repeat the first.
    this.dupOf = Int32Array.from(wanted, (name, w) => {
      const first = wanted.indexOf(name);
      return first === w ? -1 : first;
    });
    // Delimiter k (1-based) separates fields k-1 and k; mark those that bound a wanted field.
    const wcol = new Int32Array(wanted.length);
    const mark = new Uint8Array(N + 1);
    wanted.forEach((name, w) => {
      const j = columns.indexOf(name);
      wcol[w] = j;
      if (j > 0) mark[j] = 1;
      if (j < N - 1) mark[j + 1] = 1;
    });
    const mp = new Int32Array(N + 1);
    for (let k = 1; k <= N; k++) mp[k] = mp[k - 1]! + mark[k]!;
    this.wcol = wcol;
    this.markPrefix = mp;
    // nextMark[c]: the first marked delimiter number above c (N + 1 past the last).
    const nextMark = new Int32Array(N + 1);
    let next = 0x7fffffff;
    for (let k = N; k >= 0; k--) {
      nextMark[k] = next;
      if (mark[k]) next = k;
    }
    this.nextMark = nextMark;
    this.dpos = new Int32Array(N + 1);
  }
}
