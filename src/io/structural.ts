/**
 * The CSV/TSV structural scan in WebAssembly (src/io/structural.wat, made by
 * scripts/structural-wasm.mjs): 64 bytes a turn with 128-bit SIMD, it finds the delimiters and
 * line ends outside quotes and checks that the quoting is the plain RFC 4180 kind. The reader
 * then walks set bits instead of bytes. JavaScript has no SIMD, and its best word-at-a-time scan
 * (RecordReader.scan) spends most of a record's reading there; this is the part no library does
 * for a push parser over byte ranges, so it is written here.
 *
 * One instance per thread, created on first use; its memory grows to the largest data scanned
 * (about 1.4 times the bytes; the reader gives it at most an 8 MiB window). Where WebAssembly SIMD is missing, `structuralScanner()` returns
 * null and the reader keeps its JavaScript scan.
 */
import { STRUCTURAL_WASM_BASE64 } from './structural-wasm.js';
import { growTo, instantiate, type WasmMemory } from '../core/wasm.js';

type ScanFn = (inAt: number, len: number, out: number, delim: number) => number;

/** Where the data is copied: one byte before it holds a line end (the scan reads it). */
const IN = 64;
/** Zero bytes written after the data (the scan reads up to 66 bytes past its end). */
const PAD = 192;

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
}

let instance: StructuralScanner | null | undefined;

/** The scanner of this thread, or null where WebAssembly SIMD is not available. */
export function structuralScanner(): StructuralScanner | null {
  if (instance !== undefined) return instance;
  const exp = instantiate<{ memory: WasmMemory; scan: ScanFn }>(STRUCTURAL_WASM_BASE64);
  instance = exp ? createScanner(exp.memory, exp.scan) : null;
  return instance;
}

function createScanner(memory: WasmMemory, run: ScanFn): StructuralScanner {
  let bytes = new Uint8Array(memory.buffer);
  const s: StructuralScanner = {
    masks: new Int32Array(memory.buffer),
    maskAt: 0,
    scan(d, pos, n, delim) {
      const len = n - pos;
      const out = (IN + len + PAD + 63) & ~63;
      const need = out + Math.ceil(len / 64) * 24 + 64;
      if (need > memory.buffer.byteLength) {
        if (!growTo(memory, need)) throw new RangeError(`the structural scan cannot grow its memory to ${need} bytes`);
        bytes = new Uint8Array(memory.buffer);
        s.masks = new Int32Array(memory.buffer);
      }
      bytes[IN - 1] = 0x0a;
      bytes.set(d.subarray(pos, n), IN);
      bytes.fill(0, IN + len, IN + len + PAD);
      s.maskAt = out >>> 2;
      return run(IN, len, out, delim);
    },
  };
  return s;
}
