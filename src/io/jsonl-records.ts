/**
 * JSON Lines records: one JSON object per line (LF or CRLF); blank lines are skipped. A line the
 * WebAssembly check (jsonl.ts) takes as one object has its wanted values located there; any other
 * line goes through JSON.parse, which also words the error for a line that is not one object.
 * The first object's keys are the columns.
 */

import { FieldKind, type RecordBatch } from '../core/record-batch.js';
import { RowdeckError, where } from '../errors.js';
import type { InputSchema } from './batch.js';
import { JsonlChecker, JsonlCheck } from './jsonl.js';
import { REJECT_BYTES_CAP, ReaderState } from './reader-state.js';
import { rejectReason } from './reject-reason.js';

const LF = 0x0a;
const CR = 0x0d;
const QUOTE = 0x22;
const BACKSLASH = 0x5c;

/** The records of JSON Lines bytes (see the top of this file); RecordReader picks it by format. */
export class JsonlRecords extends ReaderState {
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

  override adoptSchema(schema: InputSchema): void {
    super.adoptSchema(schema);
    this.wantKeys = this.opts.wanted.map((k) => Buffer.from(k, 'utf8'));
  }

  protected override reset(base: number, line: number): void {
    super.reset(base, line);
    this.jScan = 0;
  }

  protected parseFrom(d: Buffer, pos: number, atEnd: boolean): RecordBatch | null {
    return this.parseRecords(d, pos, atEnd);
  }

  protected parseRecords(d: Buffer, pos: number, atEnd: boolean): RecordBatch | null {
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

