/**
 * The plan: what stage 2 (gather) needs besides the spill files, made from stage 1's counts.
 * It is small and serialisable (plan.json in the spill folder), so the two stages can run as
 * separate tasks, on separate threads, processes or machines. This module holds its maths:
 * the seeded order strata are dealt in, the dealing table, the counts every (cell, stratum)
 * will get, the balance they give and the tolerance check, all before anything is written.
 */
import { buildDealTable, countCells, seededStarts, type DealSpec, type DealTable } from '../core/deal.js';
import { dealBalance, orderStrata, withinTolerance, type BalanceWorst } from '../core/balance.js';
import type { Secret } from '../core/hash.js';
import { RowdeckError } from '../errors.js';
import type { InputFormat, InputSchema } from '../io/batch.js';
import { statsInLanes } from './part-stats.js';
import { optionName, optionSetting, type PartOrder, type ResolvedShuffleOptions, type Surface } from '../options.js';
import { describeStratum, keyOrderIndex, stratumValues } from '../core/strata.js';

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

/** Stage 1's counts as the plan step reads them (a run's scatter step, or a plan's scatter tasks joined). */
export interface ScatterCounts {
  records: number;
  strata: string[];
  bucketCounts: ArrayLike<number>[];
  taskStrata: number[][];
  /** `--assign hash`: records per (cell, local stratum), counted as they passed. */
  cellCounts?: Float64Array[] | null;
}

/**
 * The plan step's first figures, the same for a run on one machine and a plan's deal step: the
 * strata in dealing order, the deal and its table, and, in exact and hash modes, the records
 * every (cell, stratum) gets (null in group mode: placing the groups gives them).
 */
export function planDeal(o: ResolvedShuffleOptions, sc: ScatterCounts, secrets: { secret: Secret; rankSecret: Secret }) {
  if (sc.records === 0) throw new RowdeckError('RDK_INPUT_EMPTY', `${o.inputs.join(', ')}: no records to shuffle (every record was rejected).`);
  const d = dealingOrder(sc.strata, sc.bucketCounts, sc.taskStrata, secrets.secret);
  const deal = dealSpecOf(o, sc.records);
  const table = dealTableOf(d.strataSizes, deal, secrets.secret, secrets.rankSecret);
  const parts = partCount(deal);
  const cells = parts * deal.folds;
  const cellCounts = o.assign === 'exact' ? exactCellCounts(table) : o.assign === 'hash' ? hashCellCounts(sc.cellCounts!, d.localToGlobal, cells) : null;
  return { records: sc.records, d, deal, table, parts, cells, cellCounts };
}

/** What the plan step has found, from which `buildGatherPlan` writes stage 2's plan. */
export interface PlanInputs {
  o: ResolvedShuffleOptions;
  format: InputFormat;
  size: { bits: number; buckets: number; threads: number };
  schema: InputSchema;
  scatterTasks: number;
  cellKeyInHeader: boolean;
  deal: DealSpec;
  dealing: DealingOrder;
  table: DealTable;
  secrets: { cellSecret: Secret; rankSecret: Secret };
  groupLookup: Pick<GatherPlan, 'groupsFile' | 'groupStarts'>;
}

/** Stage 2's plan (plan.json): one function for a run on one machine and for a plan's deal step, so both deal alike. */
export function buildGatherPlan(p: PlanInputs): GatherPlan {
  const { o, table } = p;
  return {
    version: 1,
    bits: p.size.bits,
    buckets: p.size.buckets,
    scatterTasks: p.scatterTasks,
    format: p.format,
    delimiter: p.schema.delimiter,
    lineEnding: p.schema.lineEnding,
    mode: o.assign,
    order: o.order,
    cellKeyInHeader: p.cellKeyInHeader,
    deal: p.deal,
    foldColumn: o.foldColumn,
    strataCount: p.dealing.strataKeys.length,
    localToGlobal: p.dealing.taskToDealing,
    quota: Array.from(table.quota),
    cumQuota: Array.from(table.cumQuota),
    offset: Array.from(table.offset),
    cellSecret: Array.from(p.secrets.cellSecret),
    rankSecret: Array.from(p.secrets.rankSecret),
    ...p.groupLookup,
    statsColumns: o.stats ? p.schema.columns : [],
    statsInLanes: o.stats && statsInLanes(p.schema.columns.length, partCount(p.deal), p.size.threads, o.memory),
    excludeValues: o.excludeValues,
  };
}

/** Strata in their seeded dealing order, and the maps from stage 1's ids to it. */
export interface DealingOrder {
  /** Union stratum id (stage 1's merged ids) → dealing stratum id. */
  localToGlobal: number[];
  /** Per scatter task: its own stratum ids → dealing stratum ids. */
  taskToDealing: number[][];
  /** By dealing id: the stratum's canonical key and its records. */
  strataKeys: string[];
  strataSizes: number[];
}

export function dealingOrder(strata: string[], bucketCounts: ArrayLike<number>[], taskStrata: number[][], secret: Secret): DealingOrder {
  const order = orderStrata(strata, secret);
  const localToGlobal = new Array<number>(strata.length);
  order.forEach((local, g) => (localToGlobal[local] = g));
  const sum = (a: ArrayLike<number>): number => {
    let t = 0;
    for (let i = 0; i < a.length; i++) t += a[i]!;
    return t;
  };
  return {
    localToGlobal,
    taskToDealing: taskStrata.map((ids) => ids.map((u) => localToGlobal[u]!)),
    strataKeys: order.map((l) => strata[l]!),
    strataSizes: order.map((l) => sum(bucketCounts[l]!)),
  };
}

/** The splits with '*' (the rest) resolved, checking that record counts fit the input. */
export function resolveSplitWeights(o: Pick<ResolvedShuffleOptions, 'splits' | 'splitsAreCounts' | 'restSplit'> & { surface?: Surface }, records: number): DealSpec['splits'] {
  if (!o.splitsAreCounts) return o.splits;
  const given = o.splits.reduce((a, s, i) => (i === o.restSplit ? a : a + s.weight), 0);
  if (o.restSplit >= 0) {
    if (given > records) {
      throw new RowdeckError('RDK_SPLIT_SIZES', `${optionName(o.surface ?? 'cli', 'split')} asks for ${given} records before "*", but the input has ${records}. Lower the counts.`);
    }
    return o.splits.map((s, i) => (i === o.restSplit ? { name: s.name, weight: records - given } : s));
  }
  if (given !== records) {
    throw new RowdeckError(
      'RDK_SPLIT_SIZES',
      `${optionName(o.surface ?? 'cli', 'split')} counts add up to ${given}, but the input has ${records} records. Make them add up, give one split as * (the rest), or use fractions such as 0.8.`,
    );
  }
  return o.splits;
}

export function dealSpecOf(o: ResolvedShuffleOptions, records: number): DealSpec {
  return { splits: resolveSplitWeights(o, records), exactCounts: o.splitsAreCounts, partitions: o.partitions, folds: o.folds };
}

/** The dealing table of exact mode, its starts and rank permutations drawn from the seed. */
export function dealTableOf(strataSizes: number[], deal: DealSpec, secret: Secret, rankSecret: Secret): DealTable {
  return buildDealTable(strataSizes, deal, seededStarts(secret, deal.splits.length), rankSecret);
}

/** Exact mode: every (cell, stratum)'s count, `[cell * strata + s]`, from the table alone. */
export function exactCellCounts(table: DealTable): Float64Array {
  const byStratum = countCells(table); // [s * cells + cell]
  const strata = table.strataCount;
  const cells = byStratum.length / Math.max(1, strata);
  const out = new Float64Array(byStratum.length);
  for (let s = 0; s < strata; s++) for (let c = 0; c < cells; c++) out[c * strata + s] = byStratum[s * cells + c]!;
  return out;
}

/** Hash mode: the counts stage 1 took as records passed (`[union stratum][cell]`), by dealing stratum. */
export function hashCellCounts(byUnion: Float64Array[], localToGlobal: number[], cells: number): Float64Array {
  const strata = localToGlobal.length;
  const out = new Float64Array(cells * strata);
  byUnion.forEach((counts, u) => counts.forEach((n, cell) => (out[cell * strata + localToGlobal[u]!]! += n)));
  return out;
}

/**
 * The largest deviation of a class's share in a part or a fold from its overall share (unit: part
 * index, or for kind 'fold' split × folds + fold; -1 when nothing deviates).
 */
export type Worst = BalanceWorst;

/** The balance that the counts `[cell * strata + s]` give: parts (files), and folds within each split (core/balance.ts). */
export function worstDeviation(cellCounts: Float64Array, deal: DealSpec, strataSizes: number[]): Worst {
  return dealBalance(cellCounts, strataSizes, { splits: deal.splits.length, partitions: deal.partitions, folds: deal.folds });
}

/**
 * Throws, before anything is written, when the balance the counts give breaks --tolerance. Hash
 * assignment enforces none: its shares are what the keys give (reported, see the summary).
 */
export function checkTolerance(o: ResolvedShuffleOptions, worst: Worst, d: DealingOrder, partPaths: string[], deal: DealSpec, records: number): void {
  if (o.assign === 'hash' || withinTolerance(worst.deviation, o.tolerance)) return;
  const size = d.strataSizes[worst.stratum]!;
  // Named as the manifest would list it: its place among the strata in key order.
  const what = describeStratum(o.stratify.map((s) => s.name), o.excludeValues ? null : stratumValues(d.strataKeys[worst.stratum]!), keyOrderIndex(d.strataKeys, worst.stratum));
  const unit =
    worst.kind === 'part'
      ? `part ${partPaths[worst.unit]!}`
      : `fold ${worst.unit % deal.folds}${deal.splits.length > 1 ? ` of split ${deal.splits[Math.floor(worst.unit / deal.folds)]!.name}` : ''}`;
  const units = worst.kind === 'part' ? partPaths.length : deal.folds * deal.splits.length;
  const hints: string[] = [];
  if (size < units) hints.push(`fewer ${worst.kind === 'part' ? 'partitions' : 'folds'} (this class has ${size} record${size === 1 ? '' : 's'} for ${units} ${worst.kind}s)`);
  hints.push(`a looser tolerance (${optionSetting(o.surface, 'tolerance', String(Math.ceil(worst.deviation * 100) / 100))} or more)`);
  if (o.stratify.length > 0) hints.push('merging rare classes into one before the shuffle');
  if (o.assign === 'group') hints.push('smaller or more groups');
  throw new RowdeckError(
    'RDK_TOLERANCE',
    `Cannot keep class ${what} (${size} of ${records} records) within ${optionSetting(o.surface, 'tolerance', String(o.tolerance))} in every ${worst.kind}: its share in ${unit} deviates by ${(worst.deviation * 100).toFixed(1)}% from its overall share. Nothing was written. What would work: ${hints.join('; ')}.`,
    { stratum: what, count: size, deviation: worst.deviation, tolerance: o.tolerance },
  );
}
