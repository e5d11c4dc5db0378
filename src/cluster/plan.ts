/**
 * `rowdeck plan`: the shuffle cut into tasks for a batch scheduler, written to a work folder on a
 * shared file system: plan.json (everything a task needs), slurm.sh and kubernetes.yaml.
 *
 * Scatter tasks take the inputs in order: small files whole, large plain files as byte ranges
 * (each read as io/slices.ts describes), a gzip file whole. Gather tasks take contiguous ranges of
 * buckets. The bucket count and the quantile bin edges are decided here, once, for every task.
 * The options are checked exactly as `shuffle` checks them, before any work.
 */
import { createHash } from 'node:crypto';
import { closeSync, existsSync, mkdirSync, openSync, readdirSync, readFileSync, readSync, statSync } from 'node:fs';
import { availableParallelism } from 'node:os';
import { dirname, isAbsolute, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { RowdeckError, systemError } from '../errors.js';
import type { InputFormat } from '../io/batch.js';
import { isStreamInput, nameInput } from '../io/input.js';
import { chooseFormat } from '../io/sniff.js';
import type { InputSlice } from '../io/slices.js';
import { optionSetting, PLAN_DEFAULT_MEMORY, resolvePlanOptions, resolveShuffleOptions, type PlanOptions, type ResolvedShuffleOptions, type ShuffleOptions } from '../options.js';
import { VERSION } from '../version.js';
import { checkInputs } from '../engine/run-work.js';
import { computeBinEdges, type BinEdges } from '../engine/quantiles.js';
import { deriveSecrets } from '../engine/scatter-stage.js';
import { sizeRun, type RunSize } from '../engine/sizing.js';
import { fileStamp, writeFileAtomic } from './records.js';
import { renderKubernetes, renderSlurm, type ScriptPlan } from './scripts.js';

export const PLAN_FILE = 'plan.json';
export const PLAN_VERSION = 1;

/** The shuffle options a plan keeps: the JSON-safe ones (no callbacks), as given. */
export type PlannedOptions = Omit<ShuffleOptions, 'onProgress' | 'onNotice' | 'inputs' | 'out' | 'tempDir'>;

export interface PlannedInput {
  /** As given (the manifest names inputs so). */
  given: string;
  bytes: number;
  mtimeMs: number;
  gzip: boolean;
}

export interface ClusterPlan {
  kind: 'rowdeck-cluster-plan';
  version: number;
  /** The rowdeck version that wrote it; a task of another version refuses it. */
  tool: string;
  /** A hash of the plan's content: every record a task writes carries it. */
  planId: string;
  createdAt: string;
  /** The folder the plan was made in (relative input paths count from there), the work folder and the output folder, absolute. */
  cwd: string;
  work: string;
  out: string;
  options: PlannedOptions;
  inputs: PlannedInput[];
  format: InputFormat;
  size: RunSize;
  binEdges: BinEdges[];
  /** Per scatter task: its slices of the inputs, in input order. */
  scatter: { slices: InputSlice[] }[];
  /** Per gather task: its buckets [first, end). */
  gather: { first: number; end: number }[];
  runner: { node: string; cli: string };
  kubernetes: ScriptPlan['kubernetes'];
}

export type { PlanOptions } from '../options.js';

/** A byte range of a plain file is at least this large (a smaller one is not worth a task of its own). */
export const MIN_SLICE_BYTES = 1 << 20;

function hashPlan(body: Omit<ClusterPlan, 'planId'>): string {
  return createHash('sha256').update(JSON.stringify(body)).digest('hex').slice(0, 12);
}

function isGzip(path: string): boolean {
  let fd = -1;
  try {
    fd = openSync(path, 'r');
    const b = Buffer.alloc(2);
    return readSync(fd, b, 0, 2, 0) === 2 && b[0] === 0x1f && b[1] === 0x8b;
  } catch {
    return false;
  } finally {
    if (fd >= 0) closeSync(fd);
  }
}

/** Cuts the inputs into at most `tasks` scatter tasks of about equal bytes. */
export function cutInputs(inputs: { bytes: number; gzip: boolean }[], tasks: number): { slices: InputSlice[] }[] {
  const total = inputs.reduce((a, x) => a + x.bytes, 0);
  // Whole files are grouped up to the target; a plain file is cut only in pieces of at least MIN_SLICE_BYTES.
  const target = Math.max(1, Math.ceil(total / Math.max(1, tasks)));
  const out: { slices: InputSlice[] }[] = [];
  let current: InputSlice[] = [];
  let filled = 0;
  const close = (): void => {
    if (current.length > 0) out.push({ slices: current });
    current = [];
    filled = 0;
  };
  inputs.forEach((x, k) => {
    if (x.gzip || x.bytes <= MIN_SLICE_BYTES) {
      // Whole: a gzip stream cannot be entered in the middle; a small file is not worth cutting.
      if (filled > 0 && filled + x.bytes > target && out.length < tasks - 1) close();
      current.push({ input: k, start: 0, end: -1, exact: true });
      filled += x.bytes;
      return;
    }
    let at = 0;
    while (at < x.bytes) {
      let room = target - filled;
      if (room < MIN_SLICE_BYTES && filled > 0 && out.length < tasks - 1) {
        close();
        room = target;
      }
      room = Math.max(room, MIN_SLICE_BYTES);
      // The last task takes whatever is left; a remainder too small for a slice of its own goes with this one.
      let take = out.length >= tasks - 1 ? x.bytes - at : Math.min(room, x.bytes - at);
      if (x.bytes - at - take < MIN_SLICE_BYTES) take = x.bytes - at;
      const end = at + take >= x.bytes ? -1 : at + take;
      current.push({ input: k, start: at, end, exact: at === 0 });
      filled += take;
      at += take;
    }
  });
  close();
  return out;
}

/** Contiguous ranges of buckets, as even as they come. */
export function cutBuckets(buckets: number, tasks: number): { first: number; end: number }[] {
  const m = Math.max(1, Math.min(tasks, buckets));
  return Array.from({ length: m }, (_, i) => ({ first: Math.floor((i * buckets) / m), end: Math.floor(((i + 1) * buckets) / m) }));
}

/** The command-line entry of this rowdeck: its bin, dist/cli/main.cjs. */
function cliPath(): string {
  const here = dirname(fileURLToPath(import.meta.url));
  const beside = join(here, '..', 'cli', 'main.cjs');
  if (existsSync(beside)) return beside;
  return join(here, '..', '..', 'dist', 'cli', 'main.cjs');
}

function plannedOptions(o: ShuffleOptions): PlannedOptions {
  const { onProgress: _p, onNotice: _n, inputs: _i, out: _o, tempDir: _t, ...rest } = o;
  return JSON.parse(JSON.stringify(rest)) as PlannedOptions;
}

export async function planCluster(p: PlanOptions): Promise<{ plan: ClusterPlan; files: string[] }> {
  // Every option checked by plan's table (src/options/cluster.ts): shuffle's, less the spill's folder, and its own.
  const r = resolvePlanOptions(p);
  const { work: workGiven, tasks, gatherTasks, image, claim, mountPath: mount } = r;
  const o: ResolvedShuffleOptions = r.shuffle;
  const { work: _w, tasks: _t, gatherTasks: _g, image: _i, claim: _c, mountPath: _m, ...given } = p;
  // The nodes' memory is not this machine's: without --memory a task's budget is a fixed one (resolvePlanOptions too).
  const shuffleOptions = { ...given, memory: given.memory ?? PLAN_DEFAULT_MEMORY };
  for (const input of o.inputs) {
    if (isStreamInput(input)) {
      throw new RowdeckError('RDK_OPTION', `Invalid input ${nameInput(input)}: a plan's tasks read their inputs from files on a shared folder, and standard input or a pipe can be read only once, by one process. Save it to a file first.`, { file: input });
    }
  }
  checkInputs(o.inputs);
  const format = await chooseFormat(o.inputs, o.format, (v) => optionSetting(r.surface, 'format', v), 'plan');
  const work = resolve(workGiven);
  const out = resolve(o.out);
  if (existsSync(work) && (!statSync(work).isDirectory() || readdirSync(work).length > 0)) {
    throw new RowdeckError('RDK_OUTPUT_EXISTS', `${workGiven} is not a new or empty folder. Give a new --work folder for this plan (each plan has its own).`, { file: workGiven });
  }
  if (existsSync(out) && !o.force && (!statSync(out).isDirectory() || readdirSync(out).length > 0)) {
    throw new RowdeckError('RDK_OUTPUT_EXISTS', `${o.out} is not empty. Choose another --out folder, or pass --force to replace a previous rowdeck output there (finish checks it again).`, { file: o.out });
  }
  const threads = r.threadsGiven ? o.threads : Math.max(1, availableParallelism());
  const inputs: PlannedInput[] = o.inputs.map((given) => ({ given, ...fileStamp(given), gzip: isGzip(given) }));
  const size = sizeRun({ inputs: o.inputs, memory: o.memory, threads });
  // Quantile bins need one pass over the inputs before any record can be given a stratum.
  const binCols = o.stratify.filter((c) => c.bins > 0);
  const binEdges =
    binCols.length > 0
      ? await computeBinEdges({ inputs: o.inputs, format, delimiter: o.delimiter ?? undefined, header: o.header, onBadRecord: o.onBadRecord, columns: binCols, secret: deriveSecrets(o.seed).secret })
      : [];
  const scatter = cutInputs(inputs, tasks);
  const gather = cutBuckets(size.buckets, gatherTasks ?? tasks);
  const body: Omit<ClusterPlan, 'planId'> = {
    kind: 'rowdeck-cluster-plan',
    version: PLAN_VERSION,
    tool: VERSION,
    createdAt: new Date().toISOString(),
    cwd: process.cwd(),
    work,
    out,
    options: { ...plannedOptions(shuffleOptions), threads },
    inputs,
    format,
    size,
    binEdges,
    scatter,
    gather,
    runner: { node: process.execPath, cli: cliPath() },
    kubernetes: { image: image ?? 'node:20-bookworm', claim: claim ?? 'rowdeck-shared', mountPath: mount },
  };
  const plan: ClusterPlan = { ...body, planId: hashPlan(body) };
  try {
    for (const d of ['', 'scatter', 'deal', 'gather', 'logs']) mkdirSync(join(work, d), { recursive: true });
  } catch (err) {
    throw systemError(err, work, 'creating the work folder');
  }
  const script: ScriptPlan = {
    work,
    node: plan.runner.node,
    cli: plan.runner.cli,
    scatterTasks: scatter.length,
    gatherTasks: gather.length,
    threads,
    memoryMiB: Math.ceil(o.memory / 2 ** 20) + 512,
    planId: plan.planId,
    kubernetes: plan.kubernetes,
  };
  writeFileAtomic(join(work, 'slurm.sh'), renderSlurm(script));
  writeFileAtomic(join(work, 'kubernetes.yaml'), renderKubernetes(script));
  // plan.json last: a work folder with one is complete.
  writeFileAtomic(join(work, PLAN_FILE), JSON.stringify(plan, null, 2) + '\n');
  return { plan, files: [join(work, PLAN_FILE), join(work, 'slurm.sh'), join(work, 'kubernetes.yaml')] };
}

/** Reads a work folder's plan, refusing one of another version or a folder without one. */
export function loadPlan(workGiven: string): ClusterPlan {
  const work = resolve(workGiven);
  const path = join(work, PLAN_FILE);
  if (!existsSync(work)) throw new RowdeckError('RDK_INPUT_NOT_FOUND', `${workGiven}: no such folder. Give the --work folder of a plan (rowdeck plan writes it); it must be on a file system this machine sees.`, { file: workGiven });
  if (!existsSync(path)) throw new RowdeckError('RDK_PLAN', `${path}: no plan in this folder. Run rowdeck plan first, or give the work folder it wrote.`, { file: path });
  let plan: ClusterPlan;
  try {
    plan = JSON.parse(readFileSync(path, 'utf8')) as ClusterPlan;
  } catch (err) {
    throw new RowdeckError('RDK_PLAN', `${path}: not a readable plan (${(err as Error).message}). Make a new one with rowdeck plan.`, { file: path });
  }
  if (plan.kind !== 'rowdeck-cluster-plan' || plan.version !== PLAN_VERSION) {
    throw new RowdeckError('RDK_PLAN', `${path}: a plan of layout ${JSON.stringify(plan.version)}; this rowdeck reads layout ${PLAN_VERSION}. Make a new plan with this rowdeck.`, { file: path });
  }
  if (plan.tool !== VERSION) {
    throw new RowdeckError('RDK_PLAN', `${path}: written by rowdeck ${plan.tool}, and this is rowdeck ${VERSION}. Every task must run the version that made the plan: install rowdeck ${plan.tool} on the nodes, or plan again with this one.`, { file: path });
  }
  if (plan.work !== work && existsSync(plan.work) === false) {
    throw new RowdeckError('RDK_PLAN', `${path}: the plan names its work folder ${plan.work}, which this machine does not see. The work folder must be at the same path on every node.`, { file: path });
  }
  return plan;
}

/**
 * Enters a plan on this machine: its folder (relative input paths count from there), the inputs
 * checked unchanged since the plan (size and modification time; `check`: only those a task
 * reads), and its options resolved as the plan resolved them.
 */
export function enterPlan(plan: ClusterPlan, check: number[] | 'all' = 'all'): ResolvedShuffleOptions {
  try {
    process.chdir(plan.cwd);
  } catch {
    if (plan.inputs.some((x) => !isAbsolute(x.given))) {
      throw new RowdeckError('RDK_INPUT_NOT_FOUND', `The plan was made in ${plan.cwd}, which this machine does not have, and names inputs by relative paths. Plan again from a folder every node sees, or give the inputs as absolute paths.`, { file: plan.cwd });
    }
  }
  (check === 'all' ? plan.inputs : check.map((k) => plan.inputs[k]!)).forEach((x) => {
    let now: { bytes: number; mtimeMs: number };
    try {
      now = fileStamp(x.given);
    } catch (err) {
      throw systemError(err, x.given, 'looking at an input of the plan');
    }
    if (now.bytes !== x.bytes || now.mtimeMs !== x.mtimeMs) {
      throw new RowdeckError(
        'RDK_INPUT_CHANGED',
        `${x.given} changed since the plan was made (${x.bytes} bytes, modified ${new Date(x.mtimeMs).toISOString()}; now ${now.bytes} bytes, modified ${new Date(now.mtimeMs).toISOString()}). A plan's tasks must all read the same inputs: make a new plan (rowdeck plan) and run it from the start.`,
        { file: x.given },
      );
    }
  });
  return resolveShuffleOptions({ ...plan.options, inputs: plan.inputs.map((x) => x.given), out: plan.out });
}
