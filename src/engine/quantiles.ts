/**
 * Quantile bins for `--stratify COL:bins=Q`: a first pass over the inputs reads the column and
 * sets Q−1 edges at its empirical quantiles, so a continuous target can be stratified like a
 * class. Exact up to SAMPLE_VALUES values (over all binned columns); beyond that, a
 * deterministic thinning (keep values whose record hash is below a falling threshold) gives a
 * uniform sample and the edges are marked approximate. Either way the edges are a pure function
 * of (seed, inputs): the sample's size is fixed, never taken from the memory budget, so two
 * budgets give the same edges, and they are recorded in the manifest.
 */
import { hashWords3, type Secret } from '../core/hash.js';
import { binValueAt } from '../core/bins.js';
import { RowdeckError } from '../errors.js';
import type { BadRecordPolicy, InputFormat } from '../io/batch.js';
import { isStreamInput, nameInput, readRecords } from '../io/input.js';

export interface BinSpec {
  name: string;
  bins: number;
}

export interface BinEdges {
  column: string;
  bins: number;
  /** Ascending, distinct; a value v falls in bin #k where k = number of edges ≤ v. */
  edges: number[];
  exact: boolean;
  /** Values seen (numeric) and missing (empty). */
  values: number;
  missing: number;
}

export interface QuantileOptions {
  inputs: string[];
  format: InputFormat;
  delimiter: string | undefined;
  header: boolean;
  onBadRecord: BadRecordPolicy;
  columns: BinSpec[];
  secret: Secret;
}

/**
 * Values kept for the edges, over all binned columns (12 bytes each: 48 MiB at most, beside the
 * budget, during the first pass only). A fixed number, so that the edges do not depend on the
 * budget; with more values than this the sample's quantiles stand in for the column's.
 */
export const SAMPLE_VALUES = 4 * 1024 * 1024;

/**
 * The values at the given ranks (each in [0, v.length)) of `v` sorted as
 * Float64Array.prototype.sort() sorts finite values (-0 before +0), found by partitioning
 * instead of sorting (sorting a sample of millions took ~0.3 s): a range is split around the
 * median of three of its values into [< p][== p][> p], and only the parts holding a rank are
 * split further. A range that splits badly (more rounds than twice its size's bits) is sorted
 * instead, so the time stays O(n log n) at worst. `v` is reordered.
 */
export function selectRanks(v: Float64Array, ranks: readonly number[]): number[] {
  const wanted = [...new Set(ranks)].sort((x, y) => x - y);
  // Ranges to split: [l, h], the wanted ranks in it wanted[r0..r1), and its round budget.
  const stack: [number, number, number, number, number][] = [[0, v.length - 1, 0, wanted.length, 2 * Math.ceil(Math.log2(v.length + 1)) + 4]];
  while (stack.length > 0) {
    const [l, h, r0, r1, rounds] = stack.pop()!;
    if (r0 >= r1 || l >= h) continue;
    if (rounds === 0) {
      v.subarray(l, h + 1).sort();
      continue;
    }
    const m = (l + h) >>> 1;
    const a = v[l]!, b = v[m]!, z = v[h]!;
    const p = a < b ? (b < z ? b : a < z ? z : a) : a < z ? a : b < z ? z : b;
    let lt = l;
    let gt = h;
    let i = l;
    while (i <= gt) {
      const x = v[i]!;
      if (x < p) {
        v[i] = v[lt]!;
        v[lt++] = x;
        i++;
      } else if (x > p) {
        v[i] = v[gt]!;
        v[gt--] = x;
      } else i++;
    }
    // Equal to the pivot: the same value, but for zeros, where -0 sorts before +0.
    if (p === 0) {
      let negative = 0;
      for (let j = lt; j <= gt; j++) if (1 / v[j]! < 0) negative++;
      v.fill(-0, lt, lt + negative);
      v.fill(0, lt + negative, gt + 1);
    }
    let k = r0;
    while (k < r1 && wanted[k]! < lt) k++;
    let q = k;
    while (q < r1 && wanted[q]! <= gt) q++;
    stack.push([l, lt - 1, r0, k, rounds - 1], [gt + 1, h, q, r1, rounds - 1]);
  }
  return ranks.map((r) => v[r]!);
}

export async function computeBinEdges(o: QuantileOptions): Promise<BinEdges[]> {
  const stream = o.inputs.find(isStreamInput);
  if (stream !== undefined) {
    throw new RowdeckError('RDK_OPTION', `Invalid option "stratify": COLUMN:bins=Q reads the input twice, so it needs files, not standard input or a pipe (${nameInput(stream)}). Save the input to a file first.`);
  }
  const cols = o.columns;
  const cap = Math.max(1024, Math.floor(SAMPLE_VALUES / Math.max(1, cols.length)));
  const vals = cols.map(() => new Float64Array(Math.min(cap, 65536)));
  const hashes = cols.map(() => new Uint32Array(Math.min(cap, 65536)));
  const count = new Array<number>(cols.length).fill(0);
  const seen = new Array<number>(cols.length).fill(0);
  const missing = new Array<number>(cols.length).fill(0);
  // Keep a value when its record's hash is below the threshold; halve it when full.
  const threshold = new Array<number>(cols.length).fill(0x100000000);
  for await (const { input, batch } of readRecords(o.inputs, {
    format: o.format,
    ...(o.delimiter !== undefined ? { delimiter: o.delimiter } : {}),
    header: o.header,
    wanted: cols.map((c) => c.name),
    onBadRecord: o.onBadRecord === 'fail' ? 'fail' : 'skip',
  })) {
    for (let i = 0; i < batch.count; i++) {
      for (let c = 0; c < cols.length; c++) {
        const v = binValueAt(batch, i, c, cols[c]!.name, o.inputs[input]!);
        if (v === null) {
          missing[c]!++;
          continue;
        }
        seen[c]!++;
        const off = batch.offset[i]!;
        const h = hashWords3(o.secret, input, Math.floor(off / 0x100000000), off >>> 0)[0]!;
        if (h >= threshold[c]!) continue;
        if (count[c] === vals[c]!.length) {
          if (vals[c]!.length < cap) {
            const nv = new Float64Array(Math.min(cap, vals[c]!.length * 2));
            nv.set(vals[c]!);
            vals[c] = nv;
            const nh = new Uint32Array(nv.length);
            nh.set(hashes[c]!);
            hashes[c] = nh;
          } else {
            // Full: halve the threshold and drop the values above it.
            threshold[c] = threshold[c]! / 2;
            let k = 0;
            for (let j = 0; j < count[c]!; j++) {
              if (hashes[c]![j]! < threshold[c]!) {
                vals[c]![k] = vals[c]![j]!;
                hashes[c]![k] = hashes[c]![j]!;
                k++;
              }
            }
            count[c] = k;
            if (h >= threshold[c]!) continue;
          }
        }
        vals[c]![count[c]!] = v;
        hashes[c]![count[c]!] = h;
        count[c]!++;
      }
    }
  }
  return cols.map((col, c) => {
    const n = count[c]!;
    const ranks = [0];
    for (let k = 1; k < col.bins; k++) ranks.push(Math.min(n - 1, Math.floor((k * n) / col.bins)));
    // The values at those ranks of the sample in sorted order (sorting millions took ~0.3 s).
    const at = n > 0 ? selectRanks(vals[c]!.subarray(0, n), ranks) : [];
    const edges: number[] = [];
    for (let k = 1; k < col.bins; k++) {
      if (n === 0) break;
      const e = at[k]!;
      if (edges.length === 0 || e > edges[edges.length - 1]!) edges.push(e);
    }
    if (n > 0 && edges.length > 0 && edges[0] === at[0]) edges.shift();
    return { column: col.name, bins: col.bins, edges, exact: threshold[c] === 0x100000000, values: seen[c]!, missing: missing[c]! };
  });
}
