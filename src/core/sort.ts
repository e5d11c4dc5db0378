/**
 * Orders the records of one bucket by (key, identity). All keys in a bucket share their top
 * `bits` bits, so the next 32 bits are sorted with LSD radix passes (two of 16 bits, or three of
 * 11 bits for small buckets), and the rare
 * runs whose 32 bits tie are finished by comparing the whole key, then the identity (input,
 * offset). Typed arrays only; no comparator calls on the common path.
 *
 * The radix passes run in WebAssembly (src/core/sort.wat, made by scripts/sort-wasm.mjs) where
 * it has 128-bit SIMD like the other modules (the sort itself uses none), unless
 * ROWDECK_SORT=js; the JavaScript passes below give the same order.
 */
import { growTo, instantiate, type WasmMemory } from './wasm.js';
import { SORT_LAYOUT, SORT_WASM_BASE64 } from './sort-wasm.js';
import { flags } from '../flags.js';

export interface SortKeys {
  keyHi: Uint32Array;
  keyLo: Uint32Array;
  /** Identity tie-breaker (input ordinal, byte offset); read only for records whose keys tie. */
  identity: (i: number) => [number, number];
  /** Last tie-breaker, for records whose keys and identities tie (where the identity words hold something else). */
  tie?: (a: number, b: number) => number;
}

/**
 * Returns record indices in key order. The array is scratch space owned by this module: valid
 * until the next call (copy it to keep it).
 */
export function sortByKey(keys: SortKeys, count: number, bits: number): Uint32Array {
  const { keyHi, keyLo } = keys;
  if (count < 256) {
    // A comparison sort of a few records beats clearing histograms.
    const idx = Array.from({ length: count }, (_, i) => i).sort((a, b) => compareRecords(keys, a, b));
    const out = scratch(2, count);
    out.set(idx);
    return out;
  }
  const sorted = sortKernel()?.sort(keyHi, keyLo, count, bits);
  if (sorted) return finishRuns(keys, sorted, KERNEL_DIGITS!);
  const digit = scratch(0, count);
  for (let i = 0; i < count; i++) {
    digit[i] = bits === 0 ? keyHi[i]! : ((keyHi[i]! << bits) | (keyLo[i]! >>> (32 - bits))) >>> 0;
  }
  let order = scratch(2, count);
  let tmp = scratch(1, count);
  for (let i = 0; i < count; i++) order[i] = i;
  // Big buckets: two passes of 16 bits. Small ones: three passes of 11 bits, whose histograms
  // stay in the first-level cache (measured faster below ~64 Ki records).
  const passes = count >= 65536 ? [0, 16] : [0, 11, 22];
  const width = count >= 65536 ? 16 : 11;
  const mask = (1 << width) - 1;
  const hist = HIST;
  for (const shift of passes) {
    hist.fill(0, 0, mask + 1);
    for (let i = 0; i < count; i++) hist[(digit[i]! >>> shift) & mask]!++;
    let sum = 0;
    for (let d = 0; d <= mask; d++) {
      const c = hist[d]!;
      hist[d] = sum;
      sum += c;
    }
    for (let i = 0; i < count; i++) {
      const r = order[i]!;
      tmp[hist[(digit[r]! >>> shift) & mask]!++] = r;
    }
    [order, tmp] = [tmp, order];
  }
  for (let i = 0; i < count; i++) tmp[i] = digit[order[i]!]!;
  return finishRuns(keys, order, tmp);
}

/** Finishes runs of equal 32-bit digits (`sorted[i]` is record `order[i]`'s) with a full comparison. */
function finishRuns(keys: SortKeys, order: Uint32Array, sorted: Uint32Array): Uint32Array {
  const count = order.length;
  for (let i = 0; i < count; ) {
    let j = i + 1;
    const d = sorted[i]!;
    while (j < count && sorted[j] === d) j++;
    if (j - i > 1) {
      const run = Array.from(order.subarray(i, j)).sort((a, b) => compareRecords(keys, a, b));
      order.set(run, i);
    }
    i = j;
  }
  return order;
}

type SortFn = (n: number, hi: number, lo: number, bits: number, d0: number, o0: number, d1: number, o1: number, hist: number) => number;
interface SortKernel {
  /**
   * The records' order by digit (a view of the module's memory; KERNEL_DIGITS their digits), or
   * null when the module's memory cannot grow that far (the JavaScript passes take over).
   */
  sort(keyHi: Uint32Array, keyLo: Uint32Array, count: number, bits: number): Uint32Array | null;
}
let KERNEL_DIGITS: Uint32Array | null = null;
/** undefined: not tried yet in this thread; null: off or not available. */
let kernel: SortKernel | null | undefined;

/** For tests and benchmarks: the radix passes in WebAssembly (true, where available) or JavaScript. */
export function useSortKernel(on: boolean): void {
  kernel = on ? undefined : null;
}

/** Whether sortByKey's radix passes run in WebAssembly in this thread. */
export function sortsInWasm(): boolean {
  return sortKernel() !== null;
}

function sortKernel(): SortKernel | null {
  if (kernel !== undefined) return kernel;
  if (flags.sort === 'js') return (kernel = null);
  const exp = instantiate<{ memory: WasmMemory; sort: SortFn }>('sort', SORT_WASM_BASE64, ['memory', 'sort']);
  if (exp === null) return (kernel = null);
  const { memory, sort } = exp;
  kernel = {
    sort(keyHi, keyLo, count, bits) {
      // Keys, then two (digit, index) pair arrays, then the histograms.
      const n4 = 4 * count;
      const hist = 6 * n4;
      if (!growTo(memory, hist + SORT_LAYOUT.histBytes)) return null;
      const buf = memory.buffer;
      new Uint32Array(buf, 0, count).set(keyHi.subarray(0, count));
      new Uint32Array(buf, n4, count).set(keyLo.subarray(0, count));
      const second = sort(count, 0, n4, bits, 2 * n4, 3 * n4, 4 * n4, 5 * n4, hist);
      const at = second ? 4 * n4 : 2 * n4;
      KERNEL_DIGITS = new Uint32Array(buf, at, count);
      return new Uint32Array(buf, at + n4, count);
    },
  };
  return kernel;
}

// Scratch space reused across calls: a worker sorts one bucket after another, and fresh large
// typed arrays per bucket would pile up as garbage faster than the collector returns it.
const HIST = new Uint32Array(65536);
const SCRATCH: Uint32Array[] = [new Uint32Array(0), new Uint32Array(0), new Uint32Array(0)];
function scratch(k: number, count: number): Uint32Array {
  if (SCRATCH[k]!.length < count) SCRATCH[k] = new Uint32Array(Math.ceil(count * 1.25));
  return SCRATCH[k]!.subarray(0, count);
}

export function compareRecords(keys: SortKeys, a: number, b: number): number {
  const d = keys.keyHi[a]! - keys.keyHi[b]! || keys.keyLo[a]! - keys.keyLo[b]!;
  if (d !== 0) return d;
  const x = keys.identity(a);
  const y = keys.identity(b);
  return x[0] - y[0] || x[1] - y[1] || (keys.tie ? keys.tie(a, b) : 0);
}
