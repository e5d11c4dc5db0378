/**
 * Stage 2's key-order copy in WebAssembly (src/engine/gather.wat, made by
 * scripts/gather-wasm.mjs): each record of a bucket, in key order, goes to the next place of its
 * part with its fold field and line end, and its fingerprint hash is added to its part's sum.
 *
 * Why not JavaScript: the copy is one builtin call per record (copyWithin; a hundred-byte record
 * costs more in the call than in the move), and the hash re-checks its array on every word.
 * Together they were about 45 % of a gather worker's time (node --cpu-prof, 200 MB benchmark).
 *
 * Memory of the module (one instance per thread, grown to the largest bucket, never shrunk):
 *
 *   64 | spill bytes of the bucket (read straight in) | 64 spare | output: part 0, 32 spare,
 *   part 1, 32 spare, … | order | cell | at | lenTerm (n words each) | fill (one word a part) |
 *   fingerprint sums (16 bytes a part) | fold fields (32 bytes a fold)
 *
 * The spare bytes take the copy's overrun: it moves 16 bytes a step, so it may write up to 16
 * bytes past a record's end (the next record of the part, written later, or the spare after the
 * part) and read up to 15 past a record's padded copy. The parts are then copied out, without
 * the spare bytes, into the buffer that goes back to the main thread (a wasm memory cannot be
 * transferred).
 *
 * Where WebAssembly SIMD is missing, or `ROWDECK_GATHER=js` is set, `gatherKernel()` returns null
 * and gather.ts keeps its JavaScript copy.
 */
import { GATHER_LAYOUT, GATHER_WASM_BASE64 } from './gather-wasm.js';
import { growTo, instantiate, type WasmMemory } from '../core/wasm.js';
import type { Fingerprint } from '../core/hash.js';
import { flags } from '../flags.js';

type DealFn = (n: number, order: number, cell: number, at: number, lenTerm: number, fill: number, fp: number, K: number, crlf: number, fold: number, src: number) => void;

const IN = 64;
const SPARE = 64;
const PART_GAP = 32;
const { foldSlotBytes: FOLD_SLOT, foldTextMax: FOLD_TEXT_MAX, fingerprintBytes: FP_BYTES } = GATHER_LAYOUT;

const align = (x: number, a: number): number => Math.ceil(x / a) * a;

/** What `deal` reads besides the bucket's bytes (gather.ts's arrays, in its words). */
export interface KernelDeal {
  /** Records in key order (indexes into the arrays below). */
  order: Uint32Array;
  n: number;
  cellOfRec: Uint32Array;
  /** Word index of each record's header in the spill bytes. */
  at: Uint32Array;
  lenTerm: Uint32Array;
  /** Part p's bytes go to out[partStart[p], partStart[p + 1]). */
  partStart: Float64Array;
  K: number;
  /** The line end of an input's last record (when it had none) is CR LF. */
  crlf: boolean;
  /** Per fold, the bytes appended to a record of that fold (delimiter and number); null without a fold column. */
  foldBytes: Uint8Array[] | null;
}

export class GatherKernel {
  readonly #memory: WasmMemory;
  readonly #deal: DealFn;
  #out = 0;
  #arrays = 0;
  #maxRecords = 0;
  #parts = 0;
  #folds = 0;

  constructor(memory: WasmMemory, deal: DealFn) {
    this.#memory = memory;
    this.#deal = deal;
  }

  /**
   * Lays the memory out for a bucket and returns where its spill bytes go (a view to read them
   * into), or null when the memory cannot grow that far (the caller then works in JavaScript).
   * `outCap` bounds the output bytes; `maxRecords` the records.
   */
  reserve(spillBytes: number, outCap: number, maxRecords: number, parts: number, folds: number): Uint8Array | null {
    const out = align(IN + spillBytes + SPARE, 64);
    const arrays = align(out + outCap + parts * PART_GAP + SPARE, 64);
    const fp = align(arrays + 4 * (4 * maxRecords + parts), 16);
    const end = fp + FP_BYTES * parts + FOLD_SLOT * folds + SPARE;
    if (end > 0x7fff0000 || !growTo(this.#memory, end)) return null;
    this.#out = out;
    this.#arrays = arrays;
    this.#maxRecords = maxRecords;
    this.#parts = parts;
    this.#folds = folds;
    return new Uint8Array(this.#memory.buffer, IN, spillBytes);
  }

  /**
   * Copies the bucket's records (read into the view `reserve` returned) to `target` at
   * `partStart`, and adds each part's fingerprint hashes to `fps`.
   */
  deal(d: KernelDeal, target: Uint8Array, fps: Fingerprint[]): void {
    const { n, K, partStart } = d;
    const P = this.#parts;
    if (n > this.#maxRecords || partStart.length !== P + 1 || (d.foldBytes !== null && d.foldBytes.length > this.#folds)) {
      throw new Error('internal: gather kernel used beyond what was reserved');
    }
    const buf = this.#memory.buffer;
    const words = new Uint32Array(buf);
    const bytes = new Uint8Array(buf);
    const A = this.#arrays >>> 2;
    const M = this.#maxRecords;
    words.set(d.order.subarray(0, n), A);
    words.set(d.cellOfRec.subarray(0, n), A + M);
    words.set(d.at.subarray(0, n), A + 2 * M);
    words.set(d.lenTerm.subarray(0, n), A + 3 * M);
    const fill = A + 4 * M;
    for (let p = 0; p < P; p++) words[fill + p] = this.#out + partStart[p]! + p * PART_GAP;
    const fp = align(4 * (fill + P), 16);
    bytes.fill(0, fp, fp + FP_BYTES * P);
    let fold = 0;
    if (d.foldBytes) {
      fold = fp + FP_BYTES * P;
      d.foldBytes.forEach((f, k) => {
        if (f.length > FOLD_TEXT_MAX) throw new Error(`internal: fold field longer than ${FOLD_TEXT_MAX} bytes`);
        bytes[fold + k * FOLD_SLOT] = f.length;
        bytes.set(f, fold + k * FOLD_SLOT + 1);
      });
    }
    this.#deal(n, 4 * A, 4 * (A + M), 4 * (A + 2 * M), 4 * (A + 3 * M), 4 * fill, fp, K, d.crlf ? 1 : 0, fold, IN);
    for (let p = 0; p < P; p++) {
      const from = this.#out + partStart[p]! + p * PART_GAP;
      const to = this.#out + partStart[p + 1]! + p * PART_GAP;
      // Every part must end exactly where the sizes said: anything else is a bug, not data.
      if (words[fill + p] !== to) throw new Error(`internal: gather kernel wrote part ${p} to ${words[fill + p]! - from} bytes, expected ${to - from}`);
      target.set(bytes.subarray(from, to), partStart[p]!);
      const s = (fp + FP_BYTES * p) >>> 2;
      fps[p]!.merge({ lo: words[s]!, hi: words[s + 1]!, count: words[s + 2]! });
    }
  }
}

let instance: GatherKernel | null | undefined;
let disabled = flags.gather === 'js';

/** This thread's kernel, or null (no WebAssembly SIMD here, or switched off). */
export function gatherKernel(): GatherKernel | null {
  if (disabled) return null;
  if (instance === undefined) {
    const exp = instantiate<{ memory: WasmMemory; deal: DealFn }>('gather', GATHER_WASM_BASE64, ['memory', 'deal']);
    instance = exp ? new GatherKernel(exp.memory, exp.deal) : null;
  }
  return instance;
}

/** Tests and benchmarks: `false` keeps stage 2 on its JavaScript copy in this thread. */
export function useGatherKernel(on: boolean): void {
  disabled = !on;
}
