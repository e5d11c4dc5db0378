/**
 * Quantile bins for `--stratify COL:bins=Q`: a first pass over the inputs reads the column and
 * sets Q−1 edges at its empirical quantiles, so a continuous target can be stratified like a
 * class. Exact while the values fit in a quarter of the memory budget; beyond that, a
 * deterministic thinning (keep values whose record hash is below a falling threshold) gives a
 * uniform sample and the edges are marked approximate. Either way the edges are a pure function
 * of (seed, inputs), and they are recorded in the manifest.
 */
import { hashWords3, type Secret } from '../core/hash.js';
import { RowdeckError, where } from '../errors.js';
import type { BadRecordPolicy, InputFormat } from '../io/batch.js';
import { isStreamInput, nameInput, readRecords } from '../io/input.js';
import { fieldText } from '../io/reader.js';

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
  memory: number;
}

/** Number of the bin a value falls in. */
export function binOf(edges: ArrayLike<number>, v: number): number {
  let lo = 0;
  let hi = edges.length;
  while (lo < hi) {
    const m = (lo + hi) >>> 1;
    if (v >= edges[m]!) lo = m + 1;
    else hi = m;
  }
  return lo;
}

/** A readable, sortable label of bin k: "03 [12.5, 17.25)". */
export function binLabel(edges: ArrayLike<number>, k: number): string {
  const lo = k === 0 ? '-inf' : String(edges[k - 1]);
  const hi = k === edges.length ? '+inf' : String(edges[k]);
  return `${String(k + 1).padStart(2, '0')} [${lo}, ${hi})`;
}

/** Parses a bin column's text: null for missing, a number, or throws with file:line. */
export function parseBinValue(text: string | null, column: string, file: string, line: number): number | null {
  if (text === null || text.trim() === '') return null;
  const v = Number(text);
  if (!Number.isFinite(v)) {
    throw new RowdeckError(
      'ERR_NOT_NUMERIC',
      `${where(file, line)}: column "${column}" holds ${JSON.stringify(text.length > 40 ? text.slice(0, 40) + '…' : text)}, not a number; ${column}:bins=… needs numbers (or empty for missing). Stratify on it without :bins to treat it as classes.`,
      { file, line, column },
    );
  }
  return v;
}

export async function computeBinEdges(o: QuantileOptions): Promise<BinEdges[]> {
  const stream = o.inputs.find(isStreamInput);
  if (stream !== undefined) {
    throw new RowdeckError('ERR_OPTION', `Invalid option "stratify": COLUMN:bins=Q reads the input twice, so it needs files, not standard input or a pipe (${nameInput(stream)}). Save the input to a file first.`);
  }
  const cols = o.columns;
  const cap = Math.max(1024, Math.floor(o.memory / 4 / 16 / Math.max(1, cols.length)));
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
        const v = parseBinValue(fieldText(batch, i, c), cols[c]!.name, o.inputs[input]!, batch.line[i]!);
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
    const sorted = vals[c]!.slice(0, count[c]!).sort();
    const edges: number[] = [];
    for (let k = 1; k < col.bins; k++) {
      if (sorted.length === 0) break;
      const e = sorted[Math.min(sorted.length - 1, Math.floor((k * sorted.length) / col.bins))]!;
      if (edges.length === 0 || e > edges[edges.length - 1]!) edges.push(e);
    }
    if (sorted.length > 0 && edges.length > 0 && edges[0] === sorted[0]) edges.shift();
    return { column: col.name, bins: col.bins, edges, exact: threshold[c] === 0x100000000, values: seen[c]!, missing: missing[c]! };
  });
}
