/**
 * CSV/TSV records in bulk: RFC 4180 quoting with any one-byte delimiter (TSV uses the same
 * quoting rules with a tab); records end with LF or CRLF; a bare CR is data. A completely empty
 * line (nothing between two line ends) is not a record: it is skipped and only counted as a line.
 * The WebAssembly structural scan (structural.ts) or scan() reads records and their wanted
 * fields a word at a time; what they cannot finish alone (quoting to judge, a record cut by the
 * end of the data) goes to walk() (csv-walk.ts).
 */

import { FieldKind, type RecordBatch } from '../core/record-batch.js';
import { structuralScanner, WalkStop, type StructuralScanner } from './structural.js';
// scan reads words as little-endian; elsewhere it falls back to bytes.
import { LITTLE_ENDIAN } from '../core/platform.js';
import { CsvWalk, WALK_BAD, WALK_MORE } from './csv-walk.js';
import { flags } from '../flags.js';

const LF = 0x0a;
const CR = 0x0d;
const QUOTE = 0x22;

/**
 * CSV/TSV data of at least this many bytes is scanned by the WebAssembly structural scan
 * (structural.ts); shorter data by CsvRecords.scan, for which copying it into the module would
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

/** The records of CSV/TSV bytes (see the top of this file); RecordReader picks it by format. */
export class CsvRecords extends CsvWalk {
  /** Records found so far in the current parse call, and the line the next one starts on. */
  private pCount = 0;
  private pLine = 1;

  protected parseRecords(d: Buffer, pos: number, atEnd: boolean): RecordBatch | null {
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
}
