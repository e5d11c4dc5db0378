/**
 * The plan: the small, serialisable description that stage 1 (scatter) hands to stage 2
 * (gather). Stage 2 needs nothing else but the spill files, so the two stages can run as
 * separate tasks, on separate threads, processes or machines.
 */
import type { DealSpec } from '../core/deal.js';
import type { InputFormat } from '../io/batch.js';
import type { PartOrder } from '../options.js';

export type AssignMode = 'exact' | 'hash' | 'group';

export interface GatherPlan {
  version: 1;
  /** Key bits that select the bucket: bucket = keyHi >>> (32 - bits). */
  bits: number;
  buckets: number;
  /** Number of scatter tasks whose spill files make up each bucket. */
  scatterTasks: number;
  format: InputFormat;
  delimiter: number;
  /** Line terminator written for a record that had none (the last of an input). */
  lineEnding: '\n' | '\r\n';
  mode: AssignMode;
  order: PartOrder;
  /**
   * Group and hash modes placing records individually (order random or spread): the spill key
   * is the record's identity hash and the group or key hash, which decides the cell, is in the
   * spill header where exact mode keeps the identity (see ScatterTaskConfig.cellKeyInHeader).
   */
  cellKeyInHeader: boolean;
  deal: DealSpec;
  /** Name of the appended fold column, or null when no fold column is written. */
  foldColumn: string | null;
  strataCount: number;
  /** Per scatter task: local stratum id -> dealing stratum id. */
  localToGlobal: number[][];
  quota: number[];
  cumQuota: number[];
  offset: number[];
  /** Secret words for hash-mode cells (derived from the seed). */
  cellSecret: number[];
  /** Secret words of the exact dealing's rank permutations (derived from the seed; see core/permute.ts). */
  rankSecret: number[];
  /** Group mode: file (in the spill folder) holding sorted group keys and their cells. */
  groupsFile: string | null;
  /**
   * Group mode: bucket b's groups are entries starts[b] up to starts[b + 1] of that file. Null
   * with `cellKeyInHeader`: a bucket's records may belong to any group, and a lane reads the
   * whole table.
   */
  groupStarts: number[] | null;
  /** Column names, for per-part statistics; empty disables them. */
  statsColumns: string[];
  /**
   * Whether the lanes keep every part's statistics as they deal (see src/engine/part-stats.ts);
   * otherwise they are computed from the part files afterwards.
   */
  statsInLanes: boolean;
  /** Leave data values (class names, frequent values, text min/max) out of the statistics. */
  excludeValues: boolean;
}

/** Number of output parts: one file per (split, partition). */
export function partCount(deal: DealSpec): number {
  return deal.splits.length * deal.partitions;
}
