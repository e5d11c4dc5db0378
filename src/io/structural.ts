/**
 * The CSV/TSV structural scan in WebAssembly (src/io/structural.wat, made by
 * scripts/structural-wasm.mjs): 64 bytes a turn with 128-bit SIMD, it finds the delimiters and
 * line ends outside quotes and checks that the quoting is the plain RFC 4180 kind. Its walk then
 * reads the records and wanted fields off those masks, set bit by set bit, into arrays the reader
 * copies out (a few thousand records a call). JavaScript has no SIMD, and its best
 * word-at-a-time scan (RecordReader.scan) spends most of a record's reading there; the same bit
 * walk in JavaScript took about 2.5 times the module's time. This is the part no library does
 * for a push parser over byte ranges, so it is written here.
 *
 * One instance per thread, created on first use; its memory grows to the largest data scanned
 * (about 1.4 times the bytes, plus up to 1 MiB for the walk's records; the reader gives it at most
 * an 8 MiB window). Where WebAssembly SIMD is missing, `structuralScanner()` returns
 * null and the reader keeps its JavaScript scan.
 */
import { STRUCTURAL_LAYOUT, STRUCTURAL_WASM_BASE64 } from './structural-wasm.js';
import { growTo, instantiate, type WasmMemory } from '../core/wasm.js';

type ScanFn = (inAt: number, len: number, out: number, delim: number) => number;
type WalkFn = (masks: number, from: number, stop: number, pos: number, line: number, base: number,
  max: number, N: number, W: number, cfg: number, rec: number) => number;

/** What walk() stopped at. */
export const enum WalkStop {
  /** The masks are read to `stop`: `state[1]` is the start of the record not finished. */
  Done = 0,
  /** A record whose field count is not N, from `state[1]` to its LF at `state[2]` (not written). */
  FieldCount = 1,
  /** As many records as the output holds were written: go on from `state[1]`. */
  Full = 2,
}

/** The records and wanted fields the last walk() wrote (views of the module's memory). */
export interface WalkOutput {
  start: Uint32Array; end: Uint32Array; next: Uint32Array;
  offset: Float64Array; line: Float64Array;
  fieldStart: Uint32Array; fieldEnd: Uint32Array; fieldKind: Uint8Array;
}

/** Where the data is copied: one byte before it holds a line end (the scan reads it). */
const IN = STRUCTURAL_LAYOUT.dataAt;
/** Zero bytes written after the data (the scan reads up to overreadBytes past its end). */
const PAD = 192;
const { turnBytes: TURN, maskBytes: MASKS, lineAt: LINE_AT, recordBytes: RECORD, fieldBytes: FIELD } = STRUCTURAL_LAYOUT;

export interface StructuralScanner {
  /**
   * Copies `d[pos, n)` into the module and scans it; `pos` must be a record start. Returns the
   * offset (from pos) of the first byte whose quoting is not plain RFC 4180, or n - pos. The
   * masks cover 64 bytes per 6 int32s from `masks[maskAt]`: delimiters outside quotes (two
   * words, first 32 bytes first), LFs outside quotes, LFs inside quotes.
   */
  scan(d: Uint8Array, pos: number, n: number, delim: number): number;
  /** The masks of the last scan (a view that a later scan may replace). */
  masks: Int32Array;
  /** Index in `masks` of the first turn's words. */
  maskAt: number;
  /**
   * Readies walk() over the last scan's masks, for records of N fields of which the columns
   * `wcol` are wanted (`nextMark` as the reader's: the next delimiter number a wanted field
   * needs). Returns the most records one walk() writes.
   */
  prepareWalk(N: number, wcol: Int32Array, nextMark: Int32Array): number;
  /**
   * Reads records off the last scan's masks from byte `from` (a record start, relative to the
   * scan's `pos`) up to `stop`; positions written are `pos` + offset, offsets `base` + position,
   * and record lines count from `line`. Then `state` holds [records written, start of the next
   * record, LF of a refused record, its delimiters, its line ends inside quotes], and `line()`
   * the next record's line.
   */
  walk(from: number, stop: number, pos: number, line: number, base: number): WalkStop;
  readonly state: Int32Array;
  line(): number;
  out: WalkOutput;
}

/** The most records one walk() writes (tests make it small, to cross the limit often). */
let walkLimit = 4096;

/** Sets the most records one walk() writes (tests); returns the previous value. */
export function setWalkLimit(records: number): number {
  const was = walkLimit;
  walkLimit = Math.max(2, records & ~1);
  return was;
}

let instance: StructuralScanner | null | undefined;

/** The scanner of this thread, or null where WebAssembly SIMD is not available. */
export function structuralScanner(): StructuralScanner | null {
  if (instance !== undefined) return instance;
  const exp = instantiate<{ memory: WasmMemory; scan: ScanFn; walk: WalkFn }>('structural', STRUCTURAL_WASM_BASE64, ['memory', 'scan', 'walk']);
  instance = exp ? createScanner(exp.memory, exp.scan, exp.walk) : null;
  return instance;
}

function createScanner(memory: WasmMemory, run: ScanFn, runWalk: WalkFn): StructuralScanner {
  let bytes = new Uint8Array(memory.buffer);
  let state = new Int32Array(memory.buffer, 0, 8);
  let lineAt = new Float64Array(memory.buffer, LINE_AT, 1);
  // Where the last scan's masks end, and the walk's layout after them (prepareWalk).
  let maskEnd = 0, N = 0, W = 0, cfg = 0, rec = 0, max = 0;
  const views = (): void => {
    bytes = new Uint8Array(memory.buffer);
    s.masks = new Int32Array(memory.buffer);
    state = new Int32Array(memory.buffer, 0, 8);
    lineAt = new Float64Array(memory.buffer, LINE_AT, 1);
  };
  const ensure = (need: number, what: string): void => {
    if (need <= memory.buffer.byteLength) return;
    if (!growTo(memory, need)) throw new RangeError(`the structural ${what} cannot grow its memory to ${need} bytes`);
    views();
  };
  const s: StructuralScanner = {
    masks: new Int32Array(memory.buffer),
    maskAt: 0,
    get state() { return state; },
    line: () => lineAt[0]!,
    // Laid out by prepareWalk, before any walk.
    out: { start: new Uint32Array(0), end: new Uint32Array(0), next: new Uint32Array(0), offset: new Float64Array(0), line: new Float64Array(0), fieldStart: new Uint32Array(0), fieldEnd: new Uint32Array(0), fieldKind: new Uint8Array(0) },
    scan(d, pos, n, delim) {
      const len = n - pos;
      const out = (IN + len + PAD + 63) & ~63;
      maskEnd = out + Math.ceil(len / TURN) * MASKS + 64;
      ensure(maskEnd, 'scan');
      bytes[IN - 1] = 0x0a;
      bytes.set(d.subarray(pos, n), IN);
      bytes.fill(0, IN + len, IN + len + PAD);
      s.maskAt = out >>> 2;
      return run(IN, len, out, delim);
    },
    prepareWalk(cols, wcol, nextMark) {
      N = cols; W = wcol.length;
      max = Math.min(walkLimit, Math.max(2, Math.floor((1 << 20) / (RECORD + FIELD * W)) & ~1));
      cfg = maskEnd;
      rec = (cfg + 4 * (W + 2 * (N + 1)) + 7) & ~7;
      ensure(rec + max * (RECORD + FIELD * W) + 8, 'walk');
      const words = new Int32Array(memory.buffer, cfg, W + N + 1);
      words.set(wcol, 0);
      words.set(nextMark, W);
      const buf = memory.buffer, MW = max * W;
      let at = rec;
      const u32 = (k: number): Uint32Array => { const v = new Uint32Array(buf, at, k); at += 4 * k; return v; };
      const f64 = (k: number): Float64Array => { const v = new Float64Array(buf, at, k); at += 8 * k; return v; };
      s.out = {
        start: u32(max), end: u32(max), next: u32(max), offset: f64(max), line: f64(max),
        fieldStart: u32(MW), fieldEnd: u32(MW), fieldKind: new Uint8Array(buf, at, MW),
      };
      return max;
    },
    walk(from, stop, pos, line, base) {
      return runWalk(s.maskAt << 2, from, stop, pos, line, base, max, N, W, cfg, rec);
    },
  };
  return s;
}
