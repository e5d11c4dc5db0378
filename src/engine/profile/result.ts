/** What `profile()` returns: the inputs read, every column's statistics, the class balance and the warnings. */
import type { ColumnSummary } from '../../core/stats.js';
import type { InputFormat } from '../../io/batch.js';
import type { BinEdges } from '../quantiles.js';

export const PROFILE_VERSION = 1;

export interface ProfileInput {
  path: string;
  format: InputFormat;
  /** Bytes read (after gzip decompression). */
  bytes: number;
  records: number;
  rejected: number;
}

export interface ProfileClass {
  /** The class's value per stratify column (null = missing); null when values are excluded. */
  value: (string | null)[] | null;
  count: number;
  /** count / records. */
  share: number;
}

export interface ProfileStrata {
  /** As given: `name` or `name:bins=Q`. */
  columns: string[];
  /** Every stratum (combination of classes) in value order, as a shuffle's manifest lists them. */
  values: ProfileClass[];
  /** Per stratify column, its own classes (summed over the other columns), in value order. */
  byColumn: { column: string; values: ProfileClass[] }[];
  /** Quantile bin edges of `name:bins=Q` columns (edges empty when values are excluded). */
  bins: BinEdges[];
}

export type ProfileWarningCode =
  | 'CLASS_BELOW_PARTITIONS'
  | 'CLASS_BELOW_FOLDS'
  | 'TOLERANCE_UNMET'
  | 'STRATIFY_MISSING'
  | 'MANY_CLASSES'
  | 'COLUMN_EMPTY'
  | 'SINGLE_VALUE'
  | 'REJECTED_RECORDS'
  | 'BINS_APPROXIMATE';

export interface ProfileWarning {
  code: ProfileWarningCode;
  /** The column concerned, where there is one. */
  column: string | null;
  message: string;
  /** Figures behind the message (counts, suggested settings). */
  details: Record<string, number | string | null>;
}

export interface Profile {
  profileVersion: number;
  tool: { name: 'rowdeck'; version: string };
  inputs: ProfileInput[];
  /** Column names (the first input's). */
  columnNames: string[];
  records: number;
  rejected: number;
  /** The first rejected records (file, line, code; the reason unless values are excluded). */
  rejects: { file: string; line: number; code: string; reason: string | null }[];
  columns: ColumnSummary[];
  strata: ProfileStrata | null;
  warnings: ProfileWarning[];
  /** The planned dealing the warnings were checked against. */
  plan: { partitions: number; folds: number; tolerance: number };
  /** True when data values were left out. */
  excludeValues: boolean;
  threads: number;
  timingsMs: { bins: number; read: number; total: number };
}
