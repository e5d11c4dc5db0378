/**
 * The public shapes of the column statistics (stats.ts): options, the summary of a column as a
 * profile or manifest shows it, and the serialised form that goes between threads and runs.
 */

import type { SerializedDecimals } from './decimal-sums.js';
import type { SerializedMoments } from './exact-sum.js';

export interface StatsOptions {
  /** Distinct values counted exactly (with their counts) before switching to an estimate. Default 1000. */
  distinctCap?: number;
  /** Most frequent values listed per column while the counts are exact. Default 10. */
  topValues?: number;
}

export type ColumnType = 'integer' | 'number' | 'boolean' | 'datetime' | 'text' | 'empty';

export interface ValueCount {
  value: string;
  count: number;
}

/**
 * One column of a profile or manifest. Keys always appear, in this order; `null` where a figure
 * does not apply (or was left out by `excludeValues`).
 */
export interface ColumnSummary {
  name: string;
  type: ColumnType;
  /** Non-missing values. */
  count: number;
  missing: number;
  /** Distinct non-missing values: exact, or an estimate when `approximate`. */
  distinct: number;
  approximate: boolean;
  /** Numbers for integer/number columns; text for datetime/text columns, compared by UTF-8 bytes (= code point order). */
  min: number | string | null;
  max: number | string | null;
  /** Integer/number columns only; null when a value exceeds ±2^450 (see TableStats). */
  mean: number | null;
  /** Sample standard deviation (n − 1); null for fewer than two values. */
  sd: number | null;
  /** Most frequent values, count descending then value ascending; null once approximate. */
  top: ValueCount[] | null;
}

export interface SummaryOptions {
  /**
   * Leave every data value out: min/max (of every type), top values. What stays: name, type,
   * count, missing, distinct, approximate, and mean/sd of integer/number columns with at least 3
   * values. Note that moments still say something about the values (with 3 values, mean and sd
   * bound them), so publish them only where aggregate figures are acceptable.
   */
  excludeValues?: boolean;
}

/**
 * Serialised column state: plain JSON data. Below the distinct cap the value table is the whole
 * state (every figure derives from it), so only it is kept, packed: all keys' bytes in one latin1
 * string, with their lengths and counts; sorted by key in toJSON(), in the table's order in
 * toTransfer(). (A pair of a string and a count for each value took ~100 bytes of heap: 2,000
 * columns of a few hundred values came to ~80 MB.)
 */
export type SerializedColumn = SerializedExactColumn | SerializedEstimatedColumn;

export interface SerializedExactColumn {
  count: number;
  missing: number;
  values: {
    /** Every key's bytes, one after the other, as latin1 text. */
    keys: string;
    lengths: number[];
    counts: number[];
  };
}

export interface SerializedEstimatedColumn {
  count: number;
  missing: number;
  values: null;
  /** Non-missing values by kind: [integer, number, boolean, datetime, text]. */
  kinds: [number, number, number, number, number];
  numMin: number | null;
  numMax: number | null;
  /** Numeric values too large in magnitude for exact squares; moments are void when > 0. */
  huge: number;
  /** Σx, Σx² of the numbers summed as doubles (more than 15 significant digits). */
  moments: SerializedMoments;
  /** Σm, Σm² per decimal scale of the numbers summed as decimals. */
  decimals: SerializedDecimals;
  /** Smallest and largest value bytes (as latin1 text), byte order. */
  lo: string | null;
  hi: string | null;
  /** Distinct-count estimator registers (base64). */
  sketch: string;
}

export interface SerializedStats {
  version: 2;
  columns: string[];
  distinctCap: number;
  topValues: number;
  records: number;
  stats: SerializedColumn[];
}
