/**
 * CSV/TSV records one at a time, every byte judged: walk() reads a record that holds quoting
 * (or is the header) and says what is wrong with a bad one (a stray quote, a quoted field never
 * closed); readFirst() reads the header; a record still open at the end of a push is followed
 * across pushes (findEnd), and refused when a quoted field in it grows past the limit. The scans
 * that read most records in bulk are in csv-records.ts and leave the rest to these.
 */

import type { RecordBatch } from '../core/record-batch.js';
import { decodeCsvQuoted, FieldKind } from '../core/record-batch.js';
import { RowdeckError, where } from '../errors.js';
import type { RowdeckErrorCode } from '../errors.js';
// countDelims reads words as little-endian; elsewhere it falls back to bytes.
import { LITTLE_ENDIAN } from '../core/platform.js';
import { splitRecordFields } from './fields.js';
import { MAX_RECORD_BYTES, ReaderState, type RecordReaderOptions } from './reader-state.js';

const LF = 0x0a;
const CR = 0x0d;
const QUOTE = 0x22;

// Results of walk(): the record is complete, needs more bytes, or is bad.
export const WALK_OK = 0;
export const WALK_MORE = 1;
export const WALK_BAD = 2;

/** The CSV/TSV reading that goes one record at a time (see the top of this file). */
export abstract class CsvWalk extends ReaderState {
  /** The data being parsed as 32-bit words (over its whole ArrayBuffer), and its byte offset. */
  protected u32: Uint32Array<ArrayBufferLike> = new Uint32Array(0);
  protected dOff = 0;
  /** The delimiter byte repeated in all four bytes of a word. */
  protected readonly pat: number;

  // Resumption of a long partial record: scan position (relative to the record start) and
  // whether it is inside quotes, so each push scans only the new bytes (see findEnd).
  protected rPending = false;
  protected rRel = 0;
  protected rInQ = false;
  /**
   * A quoted field grew past maxRecordBytes: its bytes are dropped, and the rest of the input is
   * only scanned for the closing quote, to tell a field that is too long (RDK_FIELD_TOO_LONG) from
   * one that is never closed (RDK_UNTERMINATED_QUOTE). `quoteLast`: the bytes so far end in a
   * quote whose meaning the next byte decides.
   */
  protected over: { line: number; quoteLast: boolean } | null = null;

  // walk() results.
  protected wEnd = 0;
  protected wNext = 0;
  protected wFields = 0;
  protected wLfs = 0;
  protected wCode: RowdeckErrorCode = 'RDK_INTERNAL';
  protected wCol = 0;
  protected wLineRel = 0;
  protected wMsg = '';

  constructor(opts: RecordReaderOptions, recycle?: ReaderState) {
    super(opts, recycle);
    this.pat = Math.imul(this.delim, 0x01010101);
  }

  protected override reset(base: number, line: number): void {
    super.reset(base, line);
    this.rPending = false;
  }

  protected override takesChunk(chunk: Buffer): boolean {
    if (!this.over) return false;
    this.skipOversized(chunk);
    return true;
  }

  protected override beforeEnd(): void {
    if (this.over) {
      this.ended = true;
      // A quote as the very last byte closed the field; otherwise it never was.
      if (this.over.quoteLast) this.failTooLong();
      this.failOversized();
    }
  }

  protected parseFrom(d: Buffer, pos: number, atEnd: boolean): RecordBatch | null {
    const n = d.length;
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
    return this.parseRecords(d, pos, atEnd);
  }

  /**
   * Looks for the end of the open record starting at `s`, resuming at `s + rRel`. Jumps with
   * indexOf, so a record of many megabytes costs one pass. True when a record end is in `d`.
   */
  protected findEnd(d: Buffer, s: number, n: number): boolean {
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

  protected limitText(): string {
    const limit = this.opts.maxRecordBytes ?? MAX_RECORD_BYTES;
    return limit >= 1 << 20 ? `${limit / (1 << 20)} MiB` : `${limit} bytes`;
  }

  /** Scans bytes after an oversized quoted field for its closing quote (see `over`). */
  protected skipOversized(c: Buffer): void {
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

  protected failOversized(): never {
    const { file } = this.opts;
    const line = this.over?.line ?? this.line;
    throw new RowdeckError(
      'RDK_UNTERMINATED_QUOTE',
      `${where(file, line)}: a quoted field in the record starting here is never closed (read to the end of the input, past the ${this.limitText()} a record may hold). Close the quote; write quotes inside a quoted field twice ("").`,
      { file, line },
    );
  }

  protected failTooLong(): never {
    const { file } = this.opts;
    const line = this.over?.line ?? this.line;
    throw new RowdeckError(
      'RDK_FIELD_TOO_LONG',
      `${where(file, line)}: the record starting here holds a quoted field longer than ${this.limitText()}, the most one record may hold (the field is closed further on). Shorten or split that field, or keep such values out of the input.`,
      { file, line },
    );
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
  protected countDelims(d: Buffer, a: number, b: number, c: number): number {
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

  /**
   * Walks one CSV record from `s` that holds a quote (or is the header): quoted fields are
   * skipped with indexOf, unquoted stretches go through countDelims. On WALK_OK: wEnd (content
   * end), wNext (after the terminator), wFields, wLfs (line ends inside the record, terminator
   * excluded), and dpos as countDelims leaves it. On WALK_BAD: wCode, wCol, wLineRel (line of
   * the fault relative to the start), wMsg, and wEnd/wNext where the bad record ends.
   */
  protected walk(d: Buffer, s: number, n: number, atEnd: boolean): number {
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

  protected walkDone(e: number, next: number, c: number, lfs: number): number {
    this.wEnd = e; this.wNext = next; this.wFields = c + 1; this.wLfs = lfs;
    return WALK_OK;
  }

  protected walkBad(d: Buffer, i: number, n: number, atEnd: boolean, lfs: number, f: number, code: RowdeckErrorCode, msg: string): number {
    // The bad record runs to the next line end; quotes after the fault are not trusted.
    const l = d.indexOf(LF, i);
    if (l < 0 && !atEnd) return WALK_MORE;
    this.wCode = code; this.wCol = f + 1; this.wLineRel = lfs; this.wMsg = msg;
    if (l < 0) { this.wEnd = n; this.wNext = n; }
    else { this.wEnd = l > 0 && d[l - 1] === CR ? l - 1 : l; this.wNext = l + 1; }
    this.wLfs = lfs;
    return WALK_BAD;
  }

  /**
   * Reads the first record (skipping blank lines): the header, or with header=false the record
   * that fixes the column count (left in place to be read as data). Returns the position after
   * it, or -(pos + 1) when more bytes are needed.
   */
  protected readFirst(d: Buffer, pos: number, atEnd: boolean): number {
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
}
