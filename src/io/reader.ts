/**
 * Record reader: a push parser over Buffers that turns CSV/TSV/JSON Lines bytes into record
 * batches (byte ranges, see batch.ts). No fs or stream imports here; src/io/input.ts adapts files.
 */

import { FieldKind } from './batch.js';
import type { BadRecordPolicy, InputFormat, InputSchema, RecordBatch, RejectedRecord } from './batch.js';
import { rejectReason } from './reject-reason.js';
import { RowdeckError, where } from '../errors.js';
import type { RowdeckErrorCode } from '../errors.js';
import { structuralScanner, WalkStop, type StructuralScanner } from './structural.js';
import { JsonlChecker, JsonlCheck } from './jsonl.js';
import { LITTLE_ENDIAN } from '../core/platform.js';
import { flags } from '../flags.js';

const LF = 0x0a;
const CR = 0x0d;
const QUOTE = 0x22;
const BACKSLASH = 0x5c;
/** countDelims reads words as little-endian; elsewhere it falls back to bytes. */

/**
 * CSV/TSV data of at least this many bytes is scanned by the WebAssembly structural scan
 * (structural.ts); shorter data by RecordReader.scan, for which copying it into the module would
 * cost more than it saves. ROWDECK_SCAN=js or =simd in the environment (worker threads share
 * it) puts every piece of data on one path: for tests and benchmarks.
 */
const AUTO_MIN_BYTES = 4096;
let structuralMinBytes = scanMinBytes(flags.scan);
/**
 * The most bytes given to the structural scan at once (its memory grows to ~1.4 times that and
 * stays): larger data, such as a push holding a very long record, is scanned in windows, and the
 * record across a window's end is read by walk().
 */
const STRUCTURAL_WINDOW = 8 << 20;
let structuralWindow = STRUCTURAL_WINDOW;

function scanMinBytes(mode: string | undefined): number {
  return mode === 'js' ? Infinity : mode === 'simd' ? 1 : AUTO_MIN_BYTES;
}

/**
 * For tests and benchmarks: which scan reads CSV/TSV data in this thread ('auto': the rule
 * above), and the window of the structural scan.
 */
export function useStructuralScan(mode: 'auto' | 'js' | 'simd', windowBytes = STRUCTURAL_WINDOW): void {
  structuralMinBytes = scanMinBytes(mode);
  structuralWindow = windowBytes;
}

/** A quoted field still open after this many bytes is reported as unterminated instead of buffered on. */
export const MAX_RECORD_BYTES = 64 * 1024 * 1024;
/** Rejected records are handed over cut to this many bytes. */
const REJECT_BYTES_CAP = 64 * 1024;

/**
 * Locates every field of one CSV/TSV record's content `[start, end)` (no line terminator),
 * quote-aware, and returns the number of fields. Field f's range is written to
 * `outStart[f]`/`outEnd[f]` with its kind in `outKind[f]` (Plain, or CsvQuoted where the range
 * includes the outer quotes). Fields beyond the arrays' length are counted but not written,
 * so a caller can size its arrays from the return value and call again.
 *
 * Meant for records the reader has already accepted; on malformed bytes (text after a closing
 * quote) the field simply runs on to the next delimiter.
 */
export function splitRecordFields(
  data: Buffer,
  start: number,
  end: number,
  delimiter: number,
  outStart: Uint32Array,
  outEnd: Uint32Array,
  outKind: Uint8Array,
): number {
  const cap = Math.min(outStart.length, outEnd.length, outKind.length);
  let f = 0;
  let i = start;
  for (;;) {
    const fs = i;
    let kind: number = FieldKind.Plain;
    if (i < end && data[i] === QUOTE) {
      kind = FieldKind.CsvQuoted;
      i++;
      // Inside quotes: a doubled quote is data, a single one closes the field.
      while (i < end) {
        if (data[i] === QUOTE) {
          if (i + 1 < end && data[i + 1] === QUOTE) i += 2;
          else {
            i++;
            break;
          }
        } else i++;
      }
    }
    while (i < end && data[i] !== delimiter) i++;
    if (f < cap) {
      outStart[f] = fs;
      outEnd[f] = i;
      outKind[f] = kind;
    }
    f++;
    if (i >= end) return f;
    i++; // past the delimiter; a delimiter as last byte leaves one more (empty) field
  }
}

/** Decodes a quoted CSV field whose range `[start, end)` includes the outer quotes. */
export function decodeCsvQuoted(buf: Buffer, start: number, end: number): string {
  const s = end - start >= 2 && buf[start] === QUOTE && buf[end - 1] === QUOTE ? buf.toString('utf8', start + 1, end - 1) : buf.toString('utf8', start, end);
  return s.includes('"') ? s.replaceAll('""', '"') : s;
}

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

interface Counters {
  records: number;
  rejected: number;
  bytes: number;
  lines: number;
}

// Results of walk(): the record is complete, needs more bytes, or is bad.
const WALK_OK = 0;
const WALK_MORE = 1;
const WALK_BAD = 2;

/**
 * Push parser: feed chunks with push(), then call end(). Each call returns the complete records
 * seen so far as one batch (or null). The batch's typed arrays and `data` are reused and
 * overwritten by the next push()/end(): copy what you keep.
 *
 * CSV/TSV rules: RFC 4180 quoting with any one-byte delimiter (TSV uses the same quoting rules
 * with a tab); records end with LF or CRLF; a bare CR is data. A completely empty line (nothing
 * between two line ends) is not a record: it is skipped and only counted as a line.
 */
export class RecordReader {
  readonly stats: Counters = { records: 0, rejected: 0, bytes: 0, lines: 0 };

  private readonly opts: RecordReaderOptions;
  private readonly delim: number;
  private readonly W: number;
  private sch: InputSchema | null = null;
  /** Expected field count per record (CSV/TSV); 0 until the first record is known. */
  private ncols = 0;
  /** For each wanted slot, the earlier slot with the same name, or -1. */
  private dupOf = new Int32Array(0);
  /** Column index of each wanted field. */
  private wcol = new Int32Array(0);
  /** markPrefix[k]: how many of delimiters 1..k bound a wanted field (see countDelims). */
  private markPrefix = new Int32Array(1);
  /** nextMark[c]: the first delimiter number above c that bounds a wanted field. */
  private nextMark = new Int32Array(1).fill(0x7fffffff);
  /** Positions of the delimiters of the record being read, by number (1-based). */
  private dpos = new Int32Array(8);
  /** The data being parsed as 32-bit words (over its whole ArrayBuffer), and its byte offset. */
  private u32: Uint32Array<ArrayBufferLike> = new Uint32Array(0);
  private dOff = 0;
  /** Records found so far in the current parse call, and the line the next one starts on. */
  private pCount = 0;
  private pLine = 1;
  /** The delimiter byte repeated in all four bytes of a word. */
  private readonly pat: number;

  // Bytes of a partial record carried into the next push. Two buffers alternate so the carried
  // tail never overwrites the batch being returned.
  private carry: [Buffer, Buffer] = [Buffer.alloc(0), Buffer.alloc(0)];
  private cur: 0 | 1 = 0;
  private carryLen = 0;
  /** Input offset of the first byte of the data being parsed (= of carry[0]). */
  private base = 0;
  /** Physical line on which the next record starts. */
  private line = 1;
  private bomDone = false;
  private headerDone = false;
  /** Reading from the middle of an input with an adopted schema (see adoptSchema). */
  private resumed = false;
  private ended = false;
  private lastByte = -1;
  private lineEnding: '\n' | '\r\n' | null = null;

  // Resumption of a long partial record: scan position (relative to the record start) and
  // whether it is inside quotes, so each push scans only the new bytes (see findEnd).
  private rPending = false;
  private rRel = 0;
  private rInQ = false;
  /**
   * A quoted field grew past maxRecordBytes: its bytes are dropped, and the rest of the input is
   * only scanned for the closing quote, to tell a field that is too long (RDK_FIELD_TOO_LONG) from
   * one that is never closed (RDK_UNTERMINATED_QUOTE). `quoteLast`: the bytes so far end in a
   * quote whose meaning the next byte decides.
   */
  private over: { line: number; quoteLast: boolean } | null = null;

  // Output arrays, grown on demand and reused between batches.
  private cap = 0;
  private st = new Uint32Array(0);
  private en = new Uint32Array(0);
  private nx = new Uint32Array(0);
  private off = new Float64Array(0);
  private ln = new Float64Array(0);
  private fS = new Uint32Array(0);
  private fE = new Uint32Array(0);
  private fK = new Uint8Array(0);

  // walk() results.
  private wEnd = 0;
  private wNext = 0;
  private wFields = 0;
  private wLfs = 0;
  private wCode: RowdeckErrorCode = 'RDK_INTERNAL';
  private wCol = 0;
  private wLineRel = 0;
  private wMsg = '';

  /**
   * `recycle`: a reader done with (its last batch used up) whose output arrays this one takes
   * over, with the same number of wanted fields. Inputs of ~100 KB read one after another each
   * made and grew these arrays afresh: ~0.3 ms an input, most of it first touches of new memory.
   */
  constructor(opts: RecordReaderOptions, recycle?: RecordReader) {
    this.opts = opts;
    const d = opts.delimiter ?? (opts.format === 'tsv' ? '\t' : ',');
    const db = Buffer.from(d, 'utf8');
    if (db.length !== 1 || db[0] === QUOTE || db[0] === LF || db[0] === CR) {
      throw new RowdeckError('RDK_OPTION', `Invalid option "delimiter": expected one single-byte character other than a quote or a line end, got ${JSON.stringify(d)}`, {});
    }
    this.delim = db[0]!;
    this.pat = Math.imul(this.delim, 0x01010101);
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
    if (this.opts.format === 'jsonl') this.wantKeys = this.opts.wanted.map((k) => Buffer.from(k, 'utf8'));
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
    return this.opts.format === 'jsonl' ? this.parseJsonl(d, pos, atEnd) : this.parseCsv(d, pos, atEnd);
  }

  private reset(base: number, line: number): void {
    this.carryLen = 0;
    this.rPending = false;
    this.jScan = 0;
    this.ended = false;
    this.base = base;
    this.line = line;
  }

  push(chunk: Buffer): RecordBatch | null {
    if (this.ended) throw new RowdeckError('RDK_INTERNAL', 'RecordReader.push() after end()');
    if (chunk.length === 0) return null;
    this.stats.bytes += chunk.length;
    this.lastByte = chunk[chunk.length - 1]!;
    if (this.over) {
      this.skipOversized(chunk);
      return null;
    }
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
    if (this.over) {
      this.ended = true;
      // A quote as the very last byte closed the field; otherwise it never was.
      if (this.over.quoteLast) this.failTooLong();
      this.failOversized();
    }
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

  // --- internal ---

  private grow(min: number): void {
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

  private parse(d: Buffer, atEnd: boolean): RecordBatch | null {
    const n = d.length;
    let pos = 0;
    if (!this.bomDone) {
      // Wait for three bytes: a chunk may end inside the BOM.
      if (n < 3 && !atEnd && d[0] === 0xef && (n < 2 || d[1] === 0xbb)) return this.keep(d, 0, 0);
      if (n >= 3 && d[0] === 0xef && d[1] === 0xbb && d[2] === 0xbf) pos = 3;
      this.bomDone = true;
    }
    if (this.rPending) {
      // A long record is still open: scan only the new bytes until its end is in sight.
      if (!this.findEnd(d, pos, n) && !atEnd) {
        if (this.rInQ && n - pos > (this.opts.maxRecordBytes ?? MAX_RECORD_BYTES)) {
          // findEnd stopped at the end, or at a last-byte quote it could not decide yet.
          this.over = { line: this.line, quoteLast: pos + this.rRel < n };
          this.carryLen = 0;
          this.carry = [Buffer.alloc(0), Buffer.alloc(0)];
          return null;
        }
        return this.keep(d, pos, 0);
      }
      this.rPending = false;
    }
    return this.opts.format === 'jsonl' ? this.parseJsonl(d, pos, atEnd) : this.parseCsv(d, pos, atEnd);
  }

  /** Keeps `d[pos..]` as the carried partial record, returns the batch of `count` records. */
  private keep(d: Buffer, pos: number, count: number): RecordBatch | null {
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

  /**
   * Looks for the end of the open record starting at `s`, resuming at `s + rRel`. Jumps with
   * indexOf, so a record of many megabytes costs one pass. True when a record end is in `d`.
   */
  private findEnd(d: Buffer, s: number, n: number): boolean {
    let i = s + this.rRel;
    let inQ = this.rInQ;
    for (;;) {
      if (inQ) {
        const q = d.indexOf(QUOTE, i);
        if (q < 0) { i = n; break; }
        if (q + 1 >= n) { i = q; break; }
        if (d[q + 1] === QUOTE) i = q + 2;
        else { inQ = false; i = q + 1; }
      } else {
        const l = d.indexOf(LF, i);
        const q = d.indexOf(QUOTE, i);
        if (l >= 0 && (q < 0 || l < q)) return true;
        if (q < 0) { i = n; break; }
        // Same rule as walk(): a quote opens a field only at its start; elsewhere it is a fault
        // that walk() reports once the record's line end is here.
        if (q === s || d[q - 1] === this.delim) { inQ = true; i = q + 1; }
        else if (l >= 0) return true;
        else { i = n; break; }
      }
    }
    this.rRel = i - s;
    this.rInQ = inQ;
    return false;
  }

  private limitText(): string {
    const limit = this.opts.maxRecordBytes ?? MAX_RECORD_BYTES;
    return limit >= 1 << 20 ? `${limit / (1 << 20)} MiB` : `${limit} bytes`;
  }

  /** Scans bytes after an oversized quoted field for its closing quote (see `over`). */
  private skipOversized(c: Buffer): void {
    const o = this.over!;
    let j = 0;
    if (o.quoteLast) {
      o.quoteLast = false;
      if (c[0] !== QUOTE) this.failTooLong();
      j = 1; // a doubled quote: still inside the field
    }
    for (;;) {
      const q = c.indexOf(QUOTE, j);
      if (q < 0) return;
      if (q + 1 >= c.length) {
        o.quoteLast = true;
        return;
      }
      if (c[q + 1] === QUOTE) j = q + 2;
      else this.failTooLong();
    }
  }

  private failOversized(): never {
    const { file } = this.opts;
    const line = this.over?.line ?? this.line;
    throw new RowdeckError(
      'RDK_UNTERMINATED_QUOTE',
      `${where(file, line)}: a quoted field in the record starting here is never closed (read to the end of the input, past the ${this.limitText()} a record may hold). Close the quote; write quotes inside a quoted field twice ("").`,
      { file, line },
    );
  }

  private failTooLong(): never {
    const { file } = this.opts;
    const line = this.over?.line ?? this.line;
    throw new RowdeckError(
      'RDK_FIELD_TOO_LONG',
      `${where(file, line)}: the record starting here holds a quoted field longer than ${this.limitText()}, the most one record may hold (the field is closed further on). Shorten or split that field, or keep such values out of the input.`,
      { file, line },
    );
  }

  /** Reports a bad record: throws under 'fail', else counts it and hands it to onReject. */
  private reject(code: RowdeckErrorCode, line: number, column: number, msg: string, d: Buffer, s: number, e: number): void {
    const { file, onBadRecord, onReject } = this.opts;
    if (onBadRecord === 'fail') {
      throw new RowdeckError(code, `${where(file, line, column)}: ${msg}`, { file, line, column });
    }
    this.stats.rejected++;
    onReject?.({ file, line, code, reason: rejectReason(msg), bytes: Buffer.from(d.subarray(s, Math.min(e, s + REJECT_BYTES_CAP))) });
  }

  /**
   * Counts the delimiters in `[a, b)` (known to hold no quote and no line end), continuing from
   * `c` delimiters seen earlier in the record; returns the new count. The position of delimiter
   * number k (1-based) is written to dpos[k] whenever a wanted field needs it.
   *
   * Why words: a byte loop costs ~2 ns a byte here, the hot path's biggest cost. Reading 4 bytes
   * as one 32-bit word and flagging the bytes equal to the delimiter with a carry-free zero-byte
   * test, then counting flags with a multiply, does 4 bytes per step; only words whose flags
   * include a delimiter some wanted field is bounded by are resolved bit by bit.
   */
  private countDelims(d: Buffer, a: number, b: number, c: number): number {
    const D = this.delim, dpos = this.dpos, dl = dpos.length;
    let i = a;
    if (b - a >= 8 && LITTLE_ENDIAN) {
      const u = this.u32, off = this.dOff, pat = this.pat, mp = this.markPrefix, N = this.ncols;
      const head = a + ((4 - ((off + a) & 3)) & 3);
      for (; i < head; i++) if (d[i] === D) { c++; if (c < dl) dpos[c] = i; }
      const kEnd = (off + b) >> 2;
      for (let k = (off + i) >> 2; k < kEnd; k++) {
        const v = u[k]! ^ pat;
        // 0x80 in every byte of v that is zero, exact (no false flags from borrows).
        let t = ~(((v & 0x7f7f7f7f) + 0x7f7f7f7f) | v | 0x7f7f7f7f);
        if (t !== 0) {
          const c2 = c + (Math.imul((t >>> 7) & 0x01010101, 0x01010101) >>> 24);
          if (mp[c2 < N ? c2 : N] !== mp[c < N ? c : N]) {
            const wb = (k << 2) - off;
            while (t !== 0) {
              c++;
              if (c < dl) dpos[c] = wb + ((31 - Math.clz32(t & -t)) >> 3);
              t &= t - 1;
            }
          } else c = c2;
        }
      }
      i = (kEnd << 2) - off;
    }
    for (; i < b; i++) if (d[i] === D) { c++; if (c < dl) dpos[c] = i; }
    return c;
  }

  /** Writes the wanted fields of the record `[s, e)` from dpos (needs the full field count). */
  private fillWanted(d: Buffer, s: number, e: number, fb: number): void {
    const W = this.W, N = this.ncols, wcol = this.wcol, dpos = this.dpos;
    for (let w = 0; w < W; w++) {
      const j = wcol[w]!;
      const fs = j === 0 ? s : dpos[j]! + 1;
      const fe = j === N - 1 ? e : dpos[j + 1]!;
      this.fS[fb + w] = fs;
      this.fE[fb + w] = fe;
      this.fK[fb + w] = fe > fs && d[fs] === QUOTE ? FieldKind.CsvQuoted : FieldKind.Plain;
    }
  }

  /**
   * Walks one CSV record from `s` that holds a quote (or is the header): quoted fields are
   * skipped with indexOf, unquoted stretches go through countDelims. On WALK_OK: wEnd (content
   * end), wNext (after the terminator), wFields, wLfs (line ends inside the record, terminator
   * excluded), and dpos as countDelims leaves it. On WALK_BAD: wCode, wCol, wLineRel (line of
   * the fault relative to the start), wMsg, and wEnd/wNext where the bad record ends.
   */
  private walk(d: Buffer, s: number, n: number, atEnd: boolean): number {
    const D = this.delim, dpos = this.dpos, dl = dpos.length;
    let i = s, c = 0, lfs = 0;
    let nl = -1, nq = -1; // next line end / quote at or after i (n: none)
    for (;;) {
      if (i < n && d[i] === QUOTE) {
        const qLine = lfs;
        let j = i + 1, close = -1;
        for (;;) {
          const q = d.indexOf(QUOTE, j);
          if (q < 0) break;
          if (q + 1 >= n) {
            if (!atEnd) return WALK_MORE;
            close = q;
            break;
          }
          if (d[q + 1] === QUOTE) { j = q + 2; continue; }
          close = q;
          break;
        }
        if (nl <= i) { nl = d.indexOf(LF, i + 1); if (nl < 0) nl = n; }
        const stop = close < 0 ? n : close;
        while (nl < stop) { lfs++; nl = d.indexOf(LF, nl + 1); if (nl < 0) nl = n; }
        if (close < 0) {
          if (!atEnd) return WALK_MORE;
          this.wCode = 'RDK_UNTERMINATED_QUOTE'; this.wCol = c + 1; this.wLineRel = qLine;
          this.wMsg = `a quoted field starts here and is never closed. Close the quote, write quotes inside the field twice (""), or use --on-bad-record skip|quarantine to set the rest aside.`;
          this.wEnd = n; this.wNext = n; this.wLfs = lfs;
          return WALK_BAD;
        }
        i = close + 1;
        if (i >= n) {
          if (!atEnd) return WALK_MORE;
          return this.walkDone(n, n, c, lfs);
        }
        const ch = d[i];
        if (ch === D) { c++; if (c < dl) dpos[c] = i; i++; continue; }
        if (ch === LF) return this.walkDone(i, i + 1, c, lfs);
        if (ch === CR) {
          if (i + 1 >= n) { if (!atEnd) return WALK_MORE; }
          else if (d[i + 1] === LF) return this.walkDone(i, i + 2, c, lfs);
        }
        return this.walkBad(d, i, n, atEnd, lfs, c, 'RDK_STRAY_QUOTE',
          `text follows the closing quote of a quoted field. Inside a quoted field write a quote twice (""), or use --on-bad-record skip|quarantine to set such records aside.`);
      }
      // An unquoted stretch: up to the next quote or line end.
      if (nl < i) { nl = d.indexOf(LF, i); if (nl < 0) nl = n; }
      if (nq < i) { nq = d.indexOf(QUOTE, i); if (nq < 0) nq = n; }
      const seg = nl < nq ? nl : nq;
      if (seg >= n && !atEnd) return WALK_MORE;
      c = this.countDelims(d, i, seg, c);
      if (seg === nl) {
        let e = seg;
        if (seg < n && e > s && d[e - 1] === CR) e--;
        return this.walkDone(e, seg < n ? seg + 1 : n, c, lfs);
      }
      // A quote opens a field only at the field's start.
      if (d[seg - 1] !== D) {
        return this.walkBad(d, seg, n, atEnd, lfs, c, 'RDK_STRAY_QUOTE',
          `a quote (") inside an unquoted field. Put the whole field in quotes and write each quote in it twice (""), or use --on-bad-record skip|quarantine to set such records aside.`);
      }
      i = seg;
    }
  }

  private walkDone(e: number, next: number, c: number, lfs: number): number {
    this.wEnd = e; this.wNext = next; this.wFields = c + 1; this.wLfs = lfs;
    return WALK_OK;
  }

  private walkBad(d: Buffer, i: number, n: number, atEnd: boolean, lfs: number, f: number, code: RowdeckErrorCode, msg: string): number {
    // The bad record runs to the next line end; quotes after the fault are not trusted.
    const l = d.indexOf(LF, i);
    if (l < 0 && !atEnd) return WALK_MORE;
    this.wCode = code; this.wCol = f + 1; this.wLineRel = lfs; this.wMsg = msg;
    if (l < 0) { this.wEnd = n; this.wNext = n; }
    else { this.wEnd = l > 0 && d[l - 1] === CR ? l - 1 : l; this.wNext = l + 1; }
    this.wLfs = lfs;
    return WALK_BAD;
  }

  private parseCsv(d: Buffer, pos: number, atEnd: boolean): RecordBatch | null {
    const n = d.length;
    this.u32 = new Uint32Array(d.buffer, 0, d.buffer.byteLength >>> 2);
    this.dOff = d.byteOffset;
    if (!this.headerDone) {
      const p = this.readFirst(d, pos, atEnd);
      if (p < 0) return this.keep(d, -p - 1, 0);
      pos = p;
      if (!this.headerDone) return this.keep(d, pos, 0);
    }
    this.pCount = 0;
    this.pLine = this.line;
    // The structural scan until it meets quoting it does not check (then the byte scan goes on).
    let simd = n - pos >= structuralMinBytes ? structuralScanner() : null;
    while (pos < n) {
      if (simd !== null) {
        const p = this.scanIndexed(simd, d, pos, n - pos > structuralWindow ? pos + structuralWindow : n);
        if (p < 0) simd = null;
        pos = p < 0 ? -p - 1 : p;
      } else pos = this.scan(d, pos, n);
      if (pos >= n) break;
      // scan() stops at a record it cannot finish alone: bad, or cut by the end of the data.
      const r = this.walk(d, pos, n, atEnd);
      if (r === WALK_MORE) { this.rPending = true; this.rRel = 0; this.rInQ = false; break; }
      pos = this.takeWalk(d, pos, r);
    }
    const count = this.pCount;
    this.line = this.pLine;
    this.stats.records += count;
    this.stats.lines = this.line - 1;
    return this.keep(d, pos, count);
  }

  /** Files the record walk() just read from `s` (or rejects it); returns where the next one starts. */
  private takeWalk(d: Buffer, s: number, r: number): number {
    const e = this.wEnd, next = this.wNext, line = this.pLine;
    if (r === WALK_BAD) this.reject(this.wCode, line + this.wLineRel, this.wCol, this.wMsg, d, s, e);
    else if (this.wFields !== this.ncols) this.rejectFieldCount(line, this.wFields, d, s, e);
    else this.addRecord(d, s, e, next, line);
    this.pLine = line + this.wLfs + (next > e ? 1 : 0);
    return next;
  }

  private addRecord(d: Buffer, s: number, e: number, next: number, line: number): void {
    const count = this.pCount;
    if (count === this.cap) this.grow(count + 1);
    if (this.W > 0) this.fillWanted(d, s, e, count * this.W);
    this.st[count] = s; this.en[count] = e; this.nx[count] = next; this.off[count] = this.base + s; this.ln[count] = line;
    this.pCount = count + 1;
  }

  /**
   * Reads records in `[pos, n)` (pos a record start) with the structural scan: its masks mark
   * delimiters and record ends, and the module's walk reads the records and wanted fields off
   * them, exactly as scan() would (one record end at a time; delimiters walked bit by bit only
   * where a wanted field needs their positions, as nextMark says). A record whose field count is
   * wrong comes back here to be refused by endRecord. Returns the start of the first record it
   * could not finish (as scan()), or -(that start) - 1 when it stopped at quoting it does not
   * check: the caller then goes on with walk() and scan(), which decide what such quoting means.
   * `n` may be short of the data's end (a window): the record across it is then left to walk().
   */
  private scanIndexed(sc: StructuralScanner, d: Buffer, pos: number, n: number): number {
    const stop = sc.scan(d, pos, n, this.delim);
    const max = sc.prepareWalk(this.ncols, this.wcol, this.nextMark);
    const W = this.W, out = sc.out;
    let from = 0;
    for (;;) {
      const count = this.pCount;
      if (count + max > this.cap) this.grow(count + max);
      const r = sc.walk(from, stop, pos, this.pLine, this.base);
      const st = sc.state, k = st[0]!;
      if (k > 0) {
        this.st.set(out.start.subarray(0, k), count);
        this.en.set(out.end.subarray(0, k), count);
        this.nx.set(out.next.subarray(0, k), count);
        this.off.set(out.offset.subarray(0, k), count);
        this.ln.set(out.line.subarray(0, k), count);
        if (W > 0) {
          this.fS.set(out.fieldStart.subarray(0, k * W), count * W);
          this.fE.set(out.fieldEnd.subarray(0, k * W), count * W);
          this.fK.set(out.fieldKind.subarray(0, k * W), count * W);
        }
        this.pCount = count + k;
      }
      this.pLine = sc.line();
      if (r === WalkStop.FieldCount) {
        const p = st[2]!;
        this.endRecord(d, pos + st[1]!, pos + p, st[3]!, st[4]!);
        from = p + 1;
      } else if (r === WalkStop.Full) {
        from = st[1]!;
      } else {
        const ls = pos + st[1]!;
        return stop < n - pos ? -ls - 1 : ls;
      }
    }
  }

  /**
   * The hot loop: reads records from `pos` until the end of the data and returns the start of
   * the first record it could not finish (n when none). One pass over 32-bit words flags the
   * delimiter, LF and quote bytes together with a carry-free zero-byte test (see countDelims):
   * words with no flag are skipped, words with delimiters only are counted with a multiply, the
   * rest are resolved byte by byte in order. A quoted field is skipped with indexOf to its
   * closing quote. Anything unusual (a stray quote, the end of the data) is left to walk().
   */
  private scan(d: Buffer, pos: number, n: number): number {
    const D = this.delim, dpos = this.dpos, dl = dpos.length, N = this.ncols;
    const u = this.u32, off = this.dOff, patD = this.pat, nextMark = this.nextMark, firstMark = nextMark[0]!;
    const words = LITTLE_ENDIAN;
    let ls = pos, c = 0, lfs = 0, i = pos;
    let nm = firstMark; // number of the next delimiter a wanted field needs the position of
    for (;;) {
      let q = -1; // a quote to deal with
      const head = words ? Math.min(n, i + ((4 - ((off + i) & 3)) & 3)) : n;
      for (; i < head; i++) {
        const ch = d[i];
        if (ch === D) { c++; if (c < dl) dpos[c] = i; }
        else if (ch === LF) { this.endRecord(d, ls, i, c, lfs); ls = i + 1; c = 0; lfs = 0; nm = firstMark; }
        else if (ch === QUOTE) { q = i; break; }
      }
      if (q < 0 && i < n) {
        const kEnd = (off + n) >> 2;
        let k = (off + i) >> 2;
        for (; k < kEnd; k++) {
          const v = u[k]!;
          const x = v ^ patD, y = v ^ 0x0a0a0a0a, z = v ^ 0x22222222;
          // Cheap test first (may flag a byte above a real hit, never misses one); most words
          // hold no delimiter, LF or quote at all.
          const yz = (((y - 0x01010101) | 0) & ~y) | (((z - 0x01010101) | 0) & ~z);
          if ((((((x - 0x01010101) | 0) & ~x) | yz) & 0x80808080) === 0) continue;
          let tD = ~((((x & 0x7f7f7f7f) + 0x7f7f7f7f) | 0) | x | 0x7f7f7f7f);
          const wb = (k << 2) - off;
          if ((yz & 0x80808080) === 0) {
            const c2 = c + (Math.imul((tD >>> 7) & 0x01010101, 0x01010101) >>> 24);
            if (c2 >= nm) {
              while (tD !== 0) {
                c++;
                if (c < dl) dpos[c] = wb + ((31 - Math.clz32(tD & -tD)) >> 3);
                tD &= tD - 1;
              }
              nm = nextMark[c < N ? c : N]!;
            } else c = c2;
            continue;
          }
          const tO = ~((((y & 0x7f7f7f7f) + 0x7f7f7f7f) | 0) | y | 0x7f7f7f7f) | ~((((z & 0x7f7f7f7f) + 0x7f7f7f7f) | 0) | z | 0x7f7f7f7f);
          let t = tD | tO;
          while (t !== 0) {
            const p = wb + ((31 - Math.clz32(t & -t)) >> 3);
            t &= t - 1;
            const ch = d[p];
            if (ch === D) { c++; if (c < dl) dpos[c] = p; }
            else if (ch === LF) { this.endRecord(d, ls, p, c, lfs); ls = p + 1; c = 0; lfs = 0; nm = firstMark; }
            else { q = p; break; }
          }
          if (q >= 0) break;
        }
        if (q < 0) {
          const w = (kEnd << 2) - off;
          if (w > i) i = w;
          for (; i < n; i++) {
            const ch = d[i];
            if (ch === D) { c++; if (c < dl) dpos[c] = i; }
            else if (ch === LF) { this.endRecord(d, ls, i, c, lfs); ls = i + 1; c = 0; lfs = 0; nm = firstMark; }
            else if (ch === QUOTE) { q = i; break; }
          }
        }
      }
      if (q < 0) return ls;
      // Quoted fields, one after another while the next field starts with a quote too.
      for (;;) {
        // A quote must open a field; find its closing quote (a doubled quote is data).
        if (q !== ls && d[q - 1] !== D) return ls;
        let j = q + 1, close = -1, done = false;
        // Most quoted fields are short: a byte loop beats a native call there.
        const lim = q + 64 < n ? q + 64 : n;
        while (j < lim) {
          const ch = d[j];
          if (ch === QUOTE) {
            done = true;
            if (j + 1 >= n) break;
            if (d[j + 1] === QUOTE) { done = false; j += 2; continue; }
            close = j;
            break;
          }
          if (ch === LF) lfs++;
          j++;
        }
        if (!done) {
          // A long field: jump from quote to quote with indexOf, then count its line ends.
          const from = j;
          for (;;) {
            const x = d.indexOf(QUOTE, j);
            if (x < 0 || x + 1 >= n) break;
            if (d[x + 1] === QUOTE) { j = x + 2; continue; }
            close = x;
            break;
          }
          if (close >= 0) for (let l = d.indexOf(LF, from); l >= 0 && l < close; l = d.indexOf(LF, l + 1)) lfs++;
        }
        if (close < 0) return ls;
        i = close + 1;
        const ch = d[i];
        if (ch === D) { c++; if (c < dl) dpos[c] = i; i++; }
        else if (ch === LF) { this.endRecord(d, ls, i, c, lfs); i++; ls = i; c = 0; lfs = 0; nm = firstMark; }
        else if (ch === CR && i + 1 < n && d[i + 1] === LF) { i++; this.endRecord(d, ls, i, c, lfs); i++; ls = i; c = 0; lfs = 0; nm = firstMark; }
        else return ls; // text after the closing quote, or the data ends: walk() decides
        if (i < n && d[i] === QUOTE) q = i;
        else break;
      }
    }
  }

  /** A record `[ls, nl)` without a stray quote, `c` delimiters, `lfs` line ends inside quotes. */
  private endRecord(d: Buffer, ls: number, nl: number, c: number, lfs: number): void {
    let e = nl;
    if (e > ls && d[e - 1] === CR) e--;
    const line = this.pLine;
    this.pLine = line + 1 + lfs;
    if (e === ls) return; // blank line
    if (c + 1 !== this.ncols) this.rejectFieldCount(line, c + 1, d, ls, e);
    else this.addRecord(d, ls, e, nl + 1, line);
  }

  private rejectFieldCount(line: number, f: number, d: Buffer, s: number, e: number): void {
    const N = this.ncols;
    const ch = String.fromCharCode(this.delim);
    const shown = ch === '\t' ? 'a tab' : `"${ch}"`;
    this.reject('RDK_FIELD_COUNT', line, f > N ? N + 1 : f + 1,
      `record has ${f} field${f === 1 ? '' : 's'}, the ${this.opts.header ? 'header' : 'first record'} has ${N}. Quote fields that contain ${shown} or use --on-bad-record skip|quarantine to set such records aside.`,
      d, s, e);
  }

  /**
   * Reads the first record (skipping blank lines): the header, or with header=false the record
   * that fixes the column count (left in place to be read as data). Returns the position after
   * it, or -(pos + 1) when more bytes are needed.
   */
  private readFirst(d: Buffer, pos: number, atEnd: boolean): number {
    const n = d.length;
    const { file } = this.opts;
    for (;;) {
      if (pos >= n) return pos;
      const nl = d.indexOf(LF, pos);
      if (nl === pos || (nl === pos + 1 && d[pos] === CR)) { this.line++; pos = nl + 1; continue; }
      const r = this.walk(d, pos, n, atEnd);
      if (r === WALK_MORE) { this.rPending = true; this.rRel = 0; this.rInQ = false; return -pos - 1; }
      const what = this.opts.header ? 'the header' : 'the first record';
      if (r === WALK_BAD) {
        const line = this.line + this.wLineRel;
        throw new RowdeckError(this.wCode, `${where(file, line, this.wCol)}: in ${what}: ${this.wMsg.replace(/, or use --on-bad-record.*$/, '.')}`, { file, line, column: this.wCol });
      }
      const e = this.wEnd, next = this.wNext;
      this.lineEnding = next > e ? (next - e === 2 ? '\r\n' : '\n') : null;
      const k = splitRecordFields(d, pos, e, this.delim, new Uint32Array(0), new Uint32Array(0), new Uint8Array(0));
      let columns: string[];
      let headerBytes: Buffer | null = null;
      if (this.opts.header) {
        const fs = new Uint32Array(k), fe = new Uint32Array(k), fk = new Uint8Array(k);
        splitRecordFields(d, pos, e, this.delim, fs, fe, fk);
        columns = [];
        for (let f = 0; f < k; f++) columns.push(fk[f] === FieldKind.CsvQuoted ? decodeCsvQuoted(d, fs[f]!, fe[f]!) : d.toString('utf8', fs[f], fe[f]));
        const seen = new Map<string, number>();
        for (let f = 0; f < k; f++) {
          const prev = seen.get(columns[f]!);
          if (prev !== undefined) {
            throw new RowdeckError('RDK_DUPLICATE_HEADER',
              `${where(file, this.line, f + 1)}: the header names column "${columns[f]}" twice (columns ${prev + 1} and ${f + 1}). Rename one of them so every column can be told apart.`,
              { file, line: this.line, column: f + 1 });
          }
          seen.set(columns[f]!, f);
        }
        headerBytes = Buffer.from(d.subarray(pos, e));
        this.line += this.wLfs + (next > e ? 1 : 0);
        pos = next;
      } else {
        columns = Array.from({ length: k }, (_, f) => `column_${f + 1}`);
      }
      this.checkExpected(columns);
      this.setColumns(columns);
      this.ncols = k;
      this.sch = { format: this.opts.format, columns, headerBytes, lineEnding: this.lineEnding ?? '\n', delimiter: this.delim };
      this.headerDone = true;
      return pos;
    }
  }

  private checkExpected(columns: string[]): void {
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
  private setColumns(columns: string[]): void {
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

  // --- JSON Lines ---

  private wantKeys: Buffer[] | null = null;
  private jScan = 0;

  /** The module's check of JSON objects, once the wanted keys are known (null: JSON.parse only). */
  private jCheck: JsonlChecker | null = null;
  private jCheckTried = false;

  private jsonlChecker(d: Buffer, from: number): JsonlChecker | null {
    if (!this.jCheckTried) {
      this.jCheckTried = true;
      const refuse = this.opts.refuseKey;
      this.jCheck = JsonlChecker.create(refuse === undefined ? this.wantKeys! : [...this.wantKeys!, Buffer.from(refuse, 'utf8')]);
    }
    return this.jCheck && this.jCheck.load(d, from, d.length) ? this.jCheck : null;
  }

  private parseJsonl(d: Buffer, pos: number, atEnd: boolean): RecordBatch | null {
    const n = d.length, W = this.W, base = this.base;
    let count = 0;
    let line = this.line;
    // A carried partial line is known to hold no LF in its first jScan bytes: search on from there.
    let skip = this.jScan;
    this.jScan = 0;
    let jc = this.sch ? this.jsonlChecker(d, pos) : null;
    while (pos < n) {
      let nl = d.indexOf(LF, pos + skip);
      skip = 0;
      if (nl < 0) {
        if (!atEnd) { this.jScan = n - pos; break; }
        nl = n;
      }
      let e = nl;
      if (nl < n && e > pos && d[e - 1] === CR) e--;
      const next = nl < n ? nl + 1 : n;
      let a = pos;
      while (a < e && isJsonSpace(d[a]!)) a++;
      if (a === e) { line++; pos = next; continue; }
      if (this.lineEnding === null && nl < n) this.lineEnding = e < nl ? '\r\n' : '\n';
      // The module's check first: a line it takes needs no JSON.parse and no string.
      if (jc && jc.check(a, e) === JsonlCheck.Object) {
        // A present key's value token is never empty; an absent key's range is.
        if (this.opts.refuseKey !== undefined && jc.end(W) > jc.start(W)) this.refuseRecord(line);
        if (count === this.cap) this.grow(count + 1);
        const fb = count * W;
        for (let w = 0; w < W; w++) {
          const o = this.dupOf[w]!;
          const v = o >= 0 ? o : w;
          this.fS[fb + w] = jc.start(v); this.fE[fb + w] = jc.end(v); this.fK[fb + w] = jc.kind(v);
        }
        this.st[count] = pos; this.en[count] = e; this.nx[count] = next; this.off[count] = base + pos; this.ln[count] = line;
        count++;
        line++;
        pos = next;
        continue;
      }
      let obj: unknown;
      let fault: string | null = null;
      let column: number | undefined;
      try {
        obj = JSON.parse(d.toString('utf8', pos, e));
        if (obj === null || typeof obj !== 'object' || Array.isArray(obj)) fault = 'the line is JSON but not an object ({…}). Each line must hold one JSON object.';
      } catch (err) {
        const m = /position (\d+)/.exec((err as Error).message);
        column = m ? Number(m[1]) + 1 : undefined;
        fault = `invalid JSON (${(err as Error).message}). Each line must hold one complete JSON object; use --on-bad-record skip|quarantine to set such lines aside.`;
      }
      if (fault !== null) {
        this.rejectJson(line, column, fault, d, pos, e);
        line++;
        pos = next;
        continue;
      }
      if (this.opts.refuseKey !== undefined && Object.prototype.hasOwnProperty.call(obj, this.opts.refuseKey)) this.refuseRecord(line);
      if (!this.sch) {
        const columns = Object.keys(obj as object);
        this.setColumns(columns);
        this.wantKeys = this.opts.wanted.map((k) => Buffer.from(k, 'utf8'));
        this.sch = { format: 'jsonl', columns, headerBytes: null, lineEnding: this.lineEnding ?? '\n', delimiter: 0 };
        jc = this.jsonlChecker(d, next);
      }
      if (count === this.cap) this.grow(count + 1);
      const fb = count * W;
      for (let w = 0; w < W; w++) { this.fS[fb + w] = a; this.fE[fb + w] = a; this.fK[fb + w] = FieldKind.Missing; }
      if (W > 0) {
        this.locateJsonFields(d, a, fb);
        for (let w = 0; w < W; w++) {
          const o = this.dupOf[w]!;
          if (o >= 0) { this.fS[fb + w] = this.fS[fb + o]!; this.fE[fb + w] = this.fE[fb + o]!; this.fK[fb + w] = this.fK[fb + o]!; }
        }
      }
      this.st[count] = pos; this.en[count] = e; this.nx[count] = next; this.off[count] = base + pos; this.ln[count] = line;
      count++;
      line++;
      pos = next;
    }
    this.line = line;
    this.stats.records += count;
    this.stats.lines = line - 1;
    return this.keep(d, pos, count);
  }

  private refuseRecord(line: number): never {
    const { file, refuseKey } = this.opts;
    throw new RowdeckError(
      'RDK_OPTION',
      // The option is named by the run, as its caller spells it (see shuffle.ts).
      `${where(file, line)}: this record already has a key "${refuseKey}", the name of the fold column the output adds (it would hold two). Name the fold column otherwise.`,
      { file, line, option: 'foldColumn', column: refuseKey },
    );
  }

  private rejectJson(line: number, column: number | undefined, msg: string, d: Buffer, s: number, e: number): void {
    const { file, onBadRecord, onReject } = this.opts;
    if (onBadRecord === 'fail') throw new RowdeckError('RDK_INVALID_JSON', `${where(file, line, column)}: ${msg}`, { file, line, column });
    this.stats.rejected++;
    onReject?.({ file, line, code: 'RDK_INVALID_JSON', reason: rejectReason(msg), bytes: Buffer.from(d.subarray(s, Math.min(e, s + REJECT_BYTES_CAP))) });
  }

  /** Finds the raw value tokens of the wanted top-level keys in one valid JSON object at `i`. */
  private locateJsonFields(d: Buffer, i: number, fb: number): void {
    const keys = this.wantKeys!;
    i++; // '{'
    for (;;) {
      while (isJsonSpace(d[i]!)) i++;
      if (d[i] !== QUOTE) return; // '}'
      const ks = i;
      let esc = false;
      i++;
      while (d[i] !== QUOTE) { if (d[i] === BACKSLASH) { esc = true; i += 2; } else i++; }
      i++;
      const ke = i;
      while (isJsonSpace(d[i]!)) i++;
      i++; // ':'
      while (isJsonSpace(d[i]!)) i++;
      const vs = i;
      i = skipJsonValue(d, i);
      let w = -1;
      if (esc) w = this.opts.wanted.indexOf(JSON.parse(d.toString('utf8', ks, ke)) as string);
      else {
        const len = ke - ks - 2;
        for (let k = 0; k < keys.length; k++) {
          const kb = keys[k]!;
          if (kb.length === len && d.compare(kb, 0, len, ks + 1, ke - 1) === 0) { w = k; break; }
        }
      }
      if (w >= 0) {
        const c = d[vs];
        this.fS[fb + w] = vs;
        this.fE[fb + w] = i;
        this.fK[fb + w] = c === QUOTE ? FieldKind.JsonString : c === 0x6e /* n(ull) */ ? FieldKind.Missing : FieldKind.Plain;
      }
      while (isJsonSpace(d[i]!)) i++;
      if (d[i] !== 0x2c /* , */) return;
      i++;
    }
  }
}

function isJsonSpace(c: number): boolean {
  return c === 0x20 || c === 0x09 || c === CR || c === LF;
}

/** Returns the index just past the JSON value starting at `i` (the value is known to be valid). */
function skipJsonValue(d: Buffer, i: number): number {
  const c = d[i];
  if (c === QUOTE) {
    i++;
    while (d[i] !== QUOTE) i += d[i] === BACKSLASH ? 2 : 1;
    return i + 1;
  }
  if (c === 0x7b /* { */ || c === 0x5b /* [ */) {
    let depth = 0;
    for (;;) {
      const b = d[i];
      if (b === QUOTE) { i = skipJsonValue(d, i); continue; }
      if (b === 0x7b || b === 0x5b) depth++;
      else if (b === 0x7d || b === 0x5d) { depth--; if (depth === 0) return i + 1; }
      i++;
    }
  }
  for (;;) {
    const b = d[i];
    if (b === undefined || b === 0x2c || b === 0x7d || b === 0x5d || isJsonSpace(b)) return i;
    i++;
  }
}

/** An input with a header and nothing else (`seen`: records and refused records counted) is an error. */
export function checkNotHeaderOnly(opts: Pick<RecordReaderOptions, 'format' | 'header' | 'file'>, seen: number): void {
  if (seen === 0 && opts.format !== 'jsonl' && opts.header) {
    const { file } = opts;
    throw new RowdeckError('RDK_HEADER_ONLY', `${file}: the input has a header but no records. Check that the file was fully written, or drop it from the inputs.`, { file, line: 1 });
  }
}

/** The decoded text of wanted field `w` of record `i`: null when missing, '' for an empty CSV field. */
export function fieldText(batch: RecordBatch, i: number, w: number): string | null {
  const k = i * batch.wanted + w;
  const s = batch.fieldStart[k]!, e = batch.fieldEnd[k]!;
  switch (batch.fieldKind[k]) {
    case FieldKind.Missing:
      return null;
    case FieldKind.CsvQuoted:
      return decodeCsvQuoted(batch.data, s, e);
    case FieldKind.JsonString:
      return JSON.parse(batch.data.toString('utf8', s, e)) as string;
    default:
      return batch.data.toString('utf8', s, e);
  }
}

/** RDK_UNKNOWN_COLUMN naming the closest column by edit distance and listing all of them. */
export function unknownColumn(name: string, columns: string[], file: string): RowdeckError {
  let best = '';
  let bestD = Infinity;
  for (const c of columns) {
    const dist = measureEditDistance(name.toLowerCase(), c.toLowerCase());
    if (dist < bestD) { bestD = dist; best = c; }
  }
  const hint = columns.length > 0 ? ` Did you mean "${best}"?` : '';
  const list = columns.length > 40 ? `${columns.slice(0, 40).join(', ')}, … (${columns.length} in all)` : columns.join(', ');
  return new RowdeckError('RDK_UNKNOWN_COLUMN', `${file}: no column named "${name}".${hint} Columns: ${list}.`, { file, column: name, suggestion: best, columns });
}

/** Levenshtein distance. */
export function measureEditDistance(a: string, b: string): number {
  let prev = Array.from({ length: b.length + 1 }, (_, j) => j);
  for (let i = 1; i <= a.length; i++) {
    const cur = [i];
    for (let j = 1; j <= b.length; j++) {
      cur[j] = Math.min(prev[j]! + 1, cur[j - 1]! + 1, prev[j - 1]! + (a[i - 1] === b[j - 1] ? 0 : 1));
    }
    prev = cur;
  }
  return prev[b.length]!;
}
