/**
 * A scatter task of a plan: stage 1 over its slices of the inputs, on this machine's threads,
 * into its own folder of spill files, with a done record of what the deal step needs: every
 * worker's counts and chunks, how each slice was read (start, end, lines), the records it
 * refused (line numbers counted from the slice's start), and, for a slice that does not begin at
 * a known record start, the malformed record it may have stopped at (that is an error only once
 * the chain of slices says the slice began where it should).
 */
import { relative, join } from 'node:path';
import { RowdeckError, toWire, type WireError } from '../errors.js';
import type { InputSchema, RejectedRecord } from '../io/batch.js';
import { inputReaderOptions } from '../io/input.js';
import { headSchema, type InputSlice, type SliceRead } from '../io/slices.js';
import { deriveSecrets, runScatterStage } from '../engine/scatter-stage.js';
import type { ScatterTaskResult } from '../engine/scatter.js';
import { enterPlan, type ClusterPlan } from './plan.js';
import { runTask, type DoneRecord } from './records.js';

export interface SliceDone extends SliceRead {
  slice: InputSlice;
}

export interface RejectDone {
  slice: number;
  line: number;
  code: string;
  reason: string;
  /** The record's bytes, base64. */
  bytes: string;
  file: string;
}

export interface ScatterDone extends DoneRecord {
  slices: SliceDone[];
  /** A slice that does not start at a known record start stopped at a malformed record: the error, lines counted from the slice's start. */
  stopped: { slice: number; error: WireError } | null;
  rejects: RejectDone[];
  /** The first slice's input schema, its header as base64. */
  schema: Omit<InputSchema, 'headerBytes'> & { headerBytes: string | null };
  /** Per input the task read: bytes, records and refused records of its slices. */
  inputs: { input: number; bytes: number; records: number; rejected: number }[];
  /** Every worker's result; spill paths relative to the task's folder. */
  results: ScatterTaskResult[];
}

/** `start` overrides: a slice read again from the record start the chain found for it. */
export type SliceStarts = Map<number, number>;

/**
 * Runs scatter task `index` (`stage` reread: its slices again from `starts`, into the reread
 * folder). Returns false when it was already done.
 */
export async function runScatterTask(plan: ClusterPlan, index: number, starts: SliceStarts = new Map(), stage: 'scatter' | 'reread' = 'scatter'): Promise<boolean> {
  const task = plan.scatter[index];
  if (!task) throw new RowdeckError('RDK_INTERNAL', `scatter task ${index} is not in the plan`);
  const o = enterPlan(plan, [...new Set([0, ...task.slices.map((s) => s.input)])]);
  const t0 = Date.now();
  return runTask<Omit<ScatterDone, keyof DoneRecord>>(plan.work, stage, index, plan.planId, async (dir) => {
    const slices = task.slices.map((s, j) => (starts.has(j) ? { ...s, start: starts.get(j)!, exact: true } : s));
    const readerOf = (k: number): ReturnType<typeof inputReaderOptions> => inputReaderOptions(o.inputs[k]!, { format: plan.format, ...(o.delimiter !== null ? { delimiter: o.delimiter } : {}), header: o.header, wanted: [], onBadRecord: o.onBadRecord });
    // Slices from the middle of an input read with the schema of its head; every input's header must match the first's.
    const schemas = new Map<number, InputSchema>();
    for (const s of slices) if (s.start > 0 && !schemas.has(s.input)) schemas.set(s.input, await headSchema(o.inputs[s.input]!, readerOf(s.input)));
    const first = plan.format !== 'jsonl' && o.header && slices.some((s) => s.input > 0) ? await headSchema(o.inputs[0]!, readerOf(0)) : null;
    const rejects: RejectDone[] = [];
    let current = 0;
    let stopped: ScatterDone['stopped'] = null;
    let result: Awaited<ReturnType<typeof runScatterStage>> | null = null;
    try {
      result = await runScatterStage({
        o,
        format: plan.format,
        secrets: deriveSecrets(o.seed),
        size: plan.size,
        spillDir: dir,
        t0,
        task: {
          slices: slices.map((slice) => ({ slice, schema: schemas.get(slice.input) ?? null })),
          ...(first ? { expectedColumns: { columns: first.columns, from: o.inputs[0]! } } : {}),
          binEdges: plan.binEdges,
          onSliceStart: (j) => (current = j),
          onReject: (r: RejectedRecord) => rejects.push({ slice: current, line: r.line, code: r.code, reason: r.reason, bytes: r.bytes.toString('base64'), file: r.file }),
        },
      });
    } catch (err) {
      // Only a slice that starts at a known record start has certain line numbers and records:
      // elsewhere the deal step decides, once it knows where the slice should have begun.
      const j = err instanceof RowdeckError && typeof err.details.slice === 'number' ? err.details.slice : -1;
      if (j < 0 || slices[j]!.start === 0) throw err;
      stopped = { slice: j, error: toWire(err) };
    }
    await result?.lanes?.destroy();
    const sc = result?.sc;
    const rel = (p: string): string => relative(dir, p);
    const schema = sc?.schema ?? null;
    return {
      slices: slices.map((slice, j) => ({ slice, ...(sc?.slices?.[j] ?? { start: slice.start, end: slice.start, lines: 0, records: 0, bytes: 0, rejected: 0 }) })),
      stopped,
      rejects,
      schema: schema ? { ...schema, headerBytes: schema.headerBytes ? Buffer.from(schema.headerBytes).toString('base64') : null } : { format: plan.format, columns: [], headerBytes: null, lineEnding: '\n', delimiter: 0 },
      inputs: [...new Set(slices.map((x) => x.input))].map((k) => ({ input: k, bytes: sc?.inputs[k]?.bytes ?? 0, records: sc?.inputs[k]?.records ?? 0, rejected: sc?.inputs[k]?.rejected ?? 0 })),
      results: (sc?.results ?? []).map((r) => ({ ...r, paths: r.paths.map(rel), census: r.census ? { ...r.census, paths: r.census.paths.map(rel) } : null })),
    };
  });
}

/** A done record's spill paths made absolute again (the task's folder may have moved into place). */
export function absoluteResults(done: ScatterDone, dir: string): ScatterTaskResult[] {
  const abs = (p: string): string => join(dir, p);
  return done.results.map((r) => ({ ...r, paths: r.paths.map(abs), census: r.census ? { ...r.census, paths: r.census.paths.map(abs) } : null }));
}
