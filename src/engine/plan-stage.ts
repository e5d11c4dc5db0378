/**
 * The plan step, the same for a run on one machine (shuffle.ts) and a plan's deal step
 * (cluster/deal.ts): the deal's figures (planDeal), in group mode every group counted and placed
 * (countAndPlaceGroups), the tolerance checked before anything is written, stage 2's plan
 * written to `dir/plan.json`, and what the user is told before any part is written (whole
 * groups that keep a part or fold from its target size).
 */
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import type { InputFormat } from '../io/batch.js';
import type { ResolvedShuffleOptions } from '../options.js';
import type { CensusLanes } from '../workers/protocol.js';
import { countAndPlaceGroups } from './group-census.js';
import { partLayout, type PartInfo } from './parts.js';
import { buildGatherPlan, checkTolerance, planDeal, worstDeviation, type GatherPlan, type Worst } from './plan.js';
import type { Secrets } from './scatter-stage.js';
import type { ScatterResult } from './scatter.js';
import type { RunSize } from './sizing.js';
import { groupSizeWarnings, unitSizes } from './size-check.js';

export interface PlanStage {
  planned: ReturnType<typeof planDeal>;
  /** Records of every (cell, stratum). */
  cellCounts: Float64Array;
  /** Groups counted (group mode), else 0. */
  groupCount: number;
  layout: PartInfo[];
  worst: Worst;
  plan: GatherPlan;
  planPath: string;
  /** Whole groups: parts or folds whose sizes the groups keep from their targets (see size-check.ts). */
  warnings: string[];
}

export async function planStage(a: {
  o: ResolvedShuffleOptions;
  format: InputFormat;
  size: Pick<RunSize, 'bits' | 'buckets' | 'threads' | 'bucketCap' | 'bucketTarget'>;
  sc: ScatterResult;
  secrets: Secrets;
  /** Records carry their group's or key's hash in the spill header (placesRecordsIndividually). */
  cellKeyInHeader: boolean;
  /** Where the group census and plan.json go. */
  dir: string;
  /** Runs the group count on lanes (null: this thread); only group mode asks. */
  withLanes: <T>(use: (lanes: CensusLanes | null) => Promise<T>) => Promise<T>;
  progress: (done: number, total: number) => void;
}): Promise<PlanStage> {
  const { o, sc, size } = a;
  const planned = planDeal(o, sc, a.secrets);
  const { d, deal, table } = planned;
  let cellCounts: Float64Array;
  let groupLookup: { groupsFile: string | null; groupStarts: number[] | null } = { groupsFile: null, groupStarts: null };
  let groupCount = 0;
  if (planned.cellCounts) cellCounts = planned.cellCounts;
  else {
    // Groups are counted from the census spill where the spill is keyed by record, else from the spill itself.
    const placed = await a.withLanes((lanes) =>
      countAndPlaceGroups({
        source: sc.census ?? sc.spill,
        taskToDealing: d.taskToDealing,
        split: { cap: size.bucketCap, target: size.bucketTarget, dir: a.dir, bufferBytes: Math.floor(o.memory / 4) },
        dir: a.dir,
        lanes,
        width: Math.max(1, size.threads) * 2,
        progress: a.progress,
        deal,
        strataSizes: d.strataSizes,
        lookupBits: a.cellKeyInHeader ? null : size.bits,
      }),
    );
    ({ count: groupCount, cellCounts, groupLookup } = placed);
  }
  const layout = partLayout(o, a.format);
  const worst = worstDeviation(cellCounts, deal, d.strataSizes);
  checkTolerance(o, worst, d, layout.map((p) => p.path), deal, planned.records);
  const plan = buildGatherPlan({ o, format: a.format, size, schema: sc.schema, scatterTasks: sc.taskStrata.length, cellKeyInHeader: a.cellKeyInHeader, deal, dealing: d, table, secrets: a.secrets, groupLookup });
  const planPath = join(a.dir, 'plan.json');
  writeFileSync(planPath, JSON.stringify(plan));
  const group = o.surface === 'cli' ? `--group ${o.group!}` : `group ${JSON.stringify(o.group)}`;
  const warnings = o.assign === 'group' ? groupSizeWarnings(unitSizes(cellTotals(cellCounts, planned.cells), deal, layout.map((p) => p.path)), groupCount, o.tolerance, group) : [];
  return { planned, cellCounts, groupCount, layout, worst, plan, planPath, warnings };
}

/** Records of every cell (part and fold), over the strata. */
function cellTotals(cellCounts: Float64Array, cells: number): Float64Array {
  const strata = cells > 0 ? cellCounts.length / cells : 0;
  const totals = new Float64Array(cells);
  for (let c = 0; c < cells; c++) for (let s = 0; s < strata; s++) totals[c]! += cellCounts[c * strata + s]!;
  return totals;
}
