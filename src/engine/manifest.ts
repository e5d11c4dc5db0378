/**
 * The manifest: what went in, what came out, and the evidence that nothing was lost. Keys are
 * built in a fixed order and arrays follow fixed orders (inputs as given, parts by split then
 * partition, strata by value), so two runs with the same seed give byte-identical manifests
 * except in `run` (time, host, timings).
 */
import { cpus, hostname, totalmem } from 'node:os';
import { DEALING_SCHEME, type DealSpec } from '../core/deal.js';
import type { InputFormat, InputSchema } from '../io/batch.js';
import type { ResolvedShuffleOptions } from '../options.js';
import { compareStratumKeys, stratumValues } from '../core/strata.js';
import type { BinEdges } from './quantiles.js';

/** Version of the manifest's layout. 2 added `dealingScheme` and `options.order`. */
export const MANIFEST_VERSION = 2;

export interface PartRecord {
  path: string;
  split: string | null;
  partition: number;
  records: number;
  bytes: number;
  sha256: string;
  /** Records per stratum, aligned with `strata.values`. */
  strata: number[];
  folds: number[] | null;
  /** `foldStrata[fold][stratum]`. */
  foldStrata: number[][] | null;
  fingerprint: string;
  stats?: unknown;
}

export interface Manifest {
  manifestVersion: number;
  tool: { name: 'rowdeck'; version: string };
  /**
   * Which dealing scheme wrote the parts (core/deal.ts: DEALING_SCHEME). Absent from version 1
   * manifests, whose parts came from scheme 1 (classes evenly interleaved inside a part).
   */
  dealingScheme?: number;
  seed: string | null;
  seedIsDefault: boolean;
  options: Record<string, unknown>;
  input: {
    format: InputFormat;
    columns: string[];
    files: { path: string; bytes: number; records: number; rejected: number }[];
    records: number;
    rejected: number;
    rejectsFile: string | null;
    fingerprint: string;
    stats?: unknown;
  };
  strata: {
    columns: string[];
    /** One entry per stratum; `value` is null for every entry when values are excluded. */
    values: { value: (string | null)[] | null; records: number }[];
    /** Quantile bin edges of the columns given as COL:bins=Q. */
    bins: BinEdges[];
  };
  balance: {
    tolerance: number;
    /** Largest relative deviation of a stratum's share in a part or fold from its overall share. */
    maxDeviation: number;
    worst: { in: 'part' | 'fold'; unit: string; stratum: number } | null;
  };
  output: {
    records: number;
    fingerprint: string;
    foldColumn: string | null;
    parts: PartRecord[];
  };
  run: {
    createdAt: string;
    /** How the records were kept between the stages (see sizing.ts): decided from the input's size over the budget. */
    layout: 'memory' | 'spill' | 'multi-pass';
    /** The memory budget in bytes. */
    memory: number;
    /** No budget was given: the machine's default (a quarter of the memory available at start). */
    memoryIsDefault: boolean;
    /** Buckets split in stage 2 (the multi-pass layout). */
    bucketsSplit: number;
    /** Bytes of the spill kept in memory and written to files (absent for a plan's run: all files). */
    spillBytes?: { memory: number; files: number };
    buckets: number;
    /** Worker threads used; 0: the calling thread did the work. */
    threads: number;
    timingsMs: Record<string, number>;
    host: Record<string, unknown>;
    /** A plan's run under a batch scheduler: its id, and every task's host and times; null for one machine's run. */
    plan: ClusterRunInfo | null;
  };
}

export interface ClusterRunInfo {
  id: string;
  tasks: { stage: string; index: number; host: string; startedAt: string; endedAt: string }[];
  /** Scatter tasks the deal step read again (their slice began inside a quoted field). */
  reread: number[];
}

export interface ManifestInput {
  version: string;
  options: ResolvedShuffleOptions;
  format: InputFormat;
  schema: InputSchema;
  inputs: { path: string; bytes: number; records: number; rejected: number }[];
  records: number;
  rejected: number;
  rejectsFile: string | null;
  /** Strata in dealing order, with their sizes. */
  strataKeys: string[];
  strataSizes: number[];
  binEdges: BinEdges[];
  deal: DealSpec;
  buckets: number;
  threads: number;
  layout: 'memory' | 'spill' | 'multi-pass';
  memory: { budget: number; isDefault: boolean; splits: number };
  spillBytes?: { memory: number; files: number };
  parts: PartRecord[];
  deviation: { max: number; kind: 'part' | 'fold'; part: number; stratum: number };
  fingerprints: { input: string; output: string };
  timings: Record<string, number>;
  host: Record<string, unknown>;
  inputStats?: unknown;
  plan?: ClusterRunInfo;
}

/** The machine a manifest was written on (its `run.host`). */
export function hostInfo(): Record<string, unknown> {
  return { hostname: hostname(), cpus: cpus().length, cpuModel: cpus()[0]?.model ?? 'unknown', memory: totalmem(), node: process.version };
}

export function buildManifest(m: ManifestInput): Manifest {
  const o = m.options;
  // Strata are listed by value (stable, readable); parts' counts are re-indexed to match.
  const byValue = m.strataKeys.map((_, i) => i).sort((a, b) => compareStratumKeys(m.strataKeys[a]!, m.strataKeys[b]!));
  const reindex = (arr: number[]): number[] => byValue.map((i) => arr[i]!);
  const newIndex = new Array<number>(byValue.length);
  byValue.forEach((old, k) => (newIndex[old] = k));
  const foldName = (u: number): string => {
    const split = m.deal.splits.length > 1 ? ` of split ${m.deal.splits[Math.floor(u / m.deal.folds)]!.name}` : '';
    return `fold ${u % m.deal.folds}${split}`;
  };
  const worstUnit = m.deviation.part < 0 ? null : m.deviation.kind === 'part' ? m.parts[m.deviation.part]!.path : foldName(m.deviation.part);
  return {
    manifestVersion: MANIFEST_VERSION,
    tool: { name: 'rowdeck', version: m.version },
    dealingScheme: DEALING_SCHEME,
    seed: o.seed,
    seedIsDefault: o.seedWasDefault,
    options: {
      partitions: o.partitions,
      stratify: o.stratify.map((s) => (s.bins ? `${s.name}:bins=${s.bins}` : s.name)),
      tolerance: o.tolerance,
      folds: o.folds,
      foldColumn: o.foldColumn,
      split: o.splits.length > 1 ? m.deal.splits.map((s) => ({ name: s.name, weight: s.weight })) : null,
      splitWeightsAreCounts: o.splitsAreCounts,
      group: o.group,
      key: o.key,
      assign: o.assign,
      order: o.order,
      format: m.format,
      delimiter: m.format === 'jsonl' ? null : String.fromCharCode(m.schema.delimiter),
      header: o.header,
      gzip: o.gzip,
      // Only with gzip, so a plain run's manifest is what it was before the level existed.
      ...(o.gzip ? { gzipLevel: o.gzipLevel } : {}),
      onBadRecord: o.onBadRecord,
      excludeValues: o.excludeValues,
    },
    input: {
      format: m.format,
      columns: m.schema.columns,
      files: m.inputs.map((f) => ({ path: f.path, bytes: f.bytes, records: f.records, rejected: f.rejected })),
      records: m.records,
      rejected: m.rejected,
      rejectsFile: m.rejectsFile,
      fingerprint: m.fingerprints.input,
      ...(m.inputStats !== undefined ? { stats: m.inputStats } : {}),
    },
    strata: {
      columns: o.stratify.map((s) => s.name),
      values: byValue.map((i) => ({ value: o.excludeValues ? null : o.stratify.length ? stratumValues(m.strataKeys[i]!) : [], records: m.strataSizes[i]! })),
      bins: o.excludeValues ? m.binEdges.map((b) => ({ ...b, edges: [] })) : m.binEdges,
    },
    balance: {
      tolerance: o.tolerance,
      maxDeviation: m.deviation.max,
      worst: worstUnit === null ? null : { in: m.deviation.kind, unit: worstUnit, stratum: newIndex[m.deviation.stratum]! },
    },
    output: {
      records: m.parts.reduce((a, p) => a + p.records, 0),
      fingerprint: m.fingerprints.output,
      foldColumn: o.foldColumn,
      parts: m.parts.map((p) => ({
        path: p.path,
        split: p.split,
        partition: p.partition,
        records: p.records,
        bytes: p.bytes,
        sha256: p.sha256,
        strata: reindex(p.strata),
        folds: p.folds,
        foldStrata: p.foldStrata ? p.foldStrata.map(reindex) : null,
        fingerprint: p.fingerprint,
        ...(p.stats !== undefined ? { stats: p.stats } : {}),
      })),
    },
    run: {
      createdAt: new Date().toISOString(),
      layout: m.layout,
      memory: m.memory.budget,
      memoryIsDefault: m.memory.isDefault,
      bucketsSplit: m.memory.splits,
      ...(m.spillBytes ? { spillBytes: m.spillBytes } : {}),
      buckets: m.buckets,
      threads: m.threads,
      timingsMs: m.timings,
      host: m.host,
      plan: m.plan ?? null,
    },
  };
}
