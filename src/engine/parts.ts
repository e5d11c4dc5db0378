/**
 * The output parts: their names and layout, their header, the writers that take the gather step's
 * slices (or, for `--order spread`, keep each class apart until the part is put in order), and,
 * once every bucket is in, each part's figures for the manifest: sizes, sha256, counts by class
 * and fold, fingerprints and column statistics.
 */
import { mkdirSync } from 'node:fs';
import { dirname, join } from 'node:path';
import pLimit from 'p-limit';
import { Fingerprint } from '../core/hash.js';
import { TableStats, type ColumnSummary } from '../core/stats.js';
import { RowdeckError, systemError } from '../errors.js';
import type { InputFormat, InputSchema } from '../io/batch.js';
import { keepBytesFor, MemberCompressor, memberBytesFor, membersInFlightFor } from '../io/gzip-members.js';
import { FileSlots, PartWriter } from '../io/part-writer.js';
import { choosePartFileSlots } from '../io/open-files.js';
import type { ResolvedShuffleOptions } from '../options.js';
import { gatherFinals, type GatherLanes, type PartStatsMessage } from '../workers/protocol.js';
import type { GatherResult } from './gather.js';
import type { GatherLane } from './gather-lane.js';
import type { GatherSink } from './gather-stage.js';
import type { PartRecord } from './manifest.js';
import { SpreadParts } from './spread-parts.js';

const EXT: Record<InputFormat, string> = { csv: '.csv', tsv: '.tsv', jsonl: '.jsonl' };

export interface PartInfo {
  path: string;
  split: string | null;
  partition: number;
}

export function partLayout(o: Pick<ResolvedShuffleOptions, 'gzip' | 'splits' | 'partitions'>, format: InputFormat): PartInfo[] {
  const ext = EXT[format] + (o.gzip ? '.gz' : '');
  const named = o.splits.length > 1;
  const parts: PartInfo[] = [];
  for (const s of o.splits) {
    for (let p = 0; p < o.partitions; p++) {
      const file = `part-${String(p).padStart(5, '0')}${ext}`;
      if (!named) parts.push({ path: file, split: null, partition: p });
      else if (o.partitions === 1) parts.push({ path: `${s.name}${ext}`, split: s.name, partition: 0 });
      else parts.push({ path: `${s.name}/${file}`, split: s.name, partition: p });
    }
  }
  return parts;
}

/** Every part's first line (CSV/TSV with a header): the input's header, with the fold column's name added. */
export function headerBytes(schema: InputSchema, foldColumn: string | null, format: InputFormat): Buffer | null {
  if (format === 'jsonl' || !schema.headerBytes) return null;
  let h = Buffer.from(schema.headerBytes);
  if (foldColumn !== null) {
    const d = String.fromCharCode(schema.delimiter);
    const name = /["\r\n]/.test(foldColumn) || foldColumn.includes(d) ? `"${foldColumn.replaceAll('"', '""')}"` : foldColumn;
    h = Buffer.concat([h, Buffer.from(d + name, 'utf8')]);
  }
  return Buffer.concat([h, Buffer.from(schema.lineEnding, 'latin1')]);
}

/**
 * One writer a part, in `stage` (null: nothing is written, each part only hashed, for a replay).
 * Short slices (many parts) are gathered per part before they are written: up to 64 KiB a part,
 * an eighth of the budget over all parts, at least 8 KiB; open files stay bounded whatever the
 * part count (FileSlots). gzip parts share one compressor: members of a size set by the part
 * count, a budget's share of them in flight, and each part's unfinished member kept in memory up
 * to the same eighth of the budget, the rest parked in `spillDir` (src/io/gzip-members.ts).
 */
export async function openParts(stage: string | null, layout: PartInfo[], o: Pick<ResolvedShuffleOptions, 'gzip' | 'gzipLevel' | 'memory'>, header: Buffer | null, spillDir: string): Promise<PartWriter[]> {
  if (stage !== null) makePartFolders(stage, layout);
  const gatherBytes = Math.max(8 * 1024, Math.min(64 * 1024, Math.floor(o.memory / 8 / layout.length)));
  const slots = new FileSlots(choosePartFileSlots());
  const memberBytes = memberBytesFor(layout.length);
  const park = { dir: spillDir, keepBytes: keepBytesFor(o.memory, layout.length, memberBytes) };
  const gzip = o.gzip ? new MemberCompressor(o.gzipLevel, memberBytes, membersInFlightFor(o.memory, memberBytes), park) : null;
  const writers: PartWriter[] = [];
  try {
    for (const part of layout) writers.push(new PartWriter(stage === null ? null : join(stage, part.path), gzip, gatherBytes, slots));
    if (header) for (const w of writers) await w.write(header);
  } catch (err) {
    // Let the files go before the failure's cleanup needs descriptors of its own.
    for (const w of writers) w.abandon();
    throw err;
  }
  return writers;
}

/** The gather step's slices straight into the part files. */
export function writerSink(writers: PartWriter[]): GatherSink {
  return {
    async take(r: GatherResult) {
      const data = Buffer.from(r.data.buffer, r.data.byteOffset, r.data.byteLength);
      for (let p = 0; p < writers.length; p++) {
        const a = r.partStart[p]!;
        const e = r.partStart[p + 1]!;
        if (e > a) {
          const writing = writers[p]!.write(data.subarray(a, e));
          if (writing) await writing;
        }
      }
    },
  };
}

/** `--order spread`: the slices, class by class, into work files until every part can be put in order. */
export function spreadSink(spread: SpreadParts): GatherSink {
  return {
    async take(r: GatherResult) {
      spread.add(Buffer.from(r.data.buffer, r.data.byteOffset, r.data.byteLength), r.partStart, r.spread!);
    },
  };
}

/** Each part's records per class, summed over its folds. */
export function classCountsOf(counts: Float64Array, part: number, folds: number, strata: number): Float64Array {
  const out = new Float64Array(strata);
  for (let f = 0; f < folds; f++) for (let s = 0; s < strata; s++) out[s]! += counts[(part * folds + f) * strata + s]!;
  return out;
}

/** `--order spread`: writes every part in order from the work files. */
export async function writeSpreadParts(spread: SpreadParts, writers: PartWriter[], counts: Float64Array, folds: number, strata: number, progress: (done: number, total: number) => void): Promise<void> {
  try {
    for (let p = 0; p < writers.length; p++) {
      await spread.writePart(p, classCountsOf(counts, p, folds, strata), writers[p]!);
      progress(p + 1, writers.length);
    }
  } finally {
    spread.close();
  }
}

/**
 * Closes every writer: each part's size and sha256. All at once, so the last gzip members of
 * all parts are compressed together.
 */
export async function closeParts(writers: PartWriter[]): Promise<{ bytes: number; sha256: string }[]> {
  return Promise.all(writers.map((w) => w.close()));
}

export interface PartStatistics {
  parts: ColumnSummary[][];
  input: ColumnSummary[];
}

/**
 * `--stats`: every part's column summary and the whole input's (the parts' tables merged: exact,
 * so equal to one pass over the input). Where the lanes kept every part's tables as they dealt,
 * they hand them over now; otherwise each part is read back from its file, a part a lane at a
 * time (see part-stats.ts), and each lane hands over the table of the parts it read.
 */
export async function partStatistics(a: {
  columns: string[];
  partCount: number;
  statsInLanes: boolean;
  excludeValues: boolean;
  lanes: GatherLanes;
  inline: GatherLane | null;
  /** Part files to read back (statsInLanes false). */
  files: string[] | null;
  headerLength: number;
  threads: number;
  progress: (done: number, total: number) => void;
}): Promise<PartStatistics> {
  const whole = new TableStats(a.columns);
  const parts: ColumnSummary[][] = [];
  if (!a.statsInLanes) {
    if (a.files === null) throw new RowdeckError('RDK_INTERNAL', 'statistics read back from parts that were not written');
    const files = a.files;
    let done = 0;
    a.progress(0, files.length);
    const limit = pLimit(Math.max(1, a.threads));
    await Promise.all(
      files.map((partFile, p) =>
        limit(async () => {
          const task: PartStatsMessage = { kind: 'partStats', partFile, headerBytes: a.headerLength, excludeValues: a.excludeValues };
          const t = a.inline ? (await a.inline.partStats(task)).result : await a.lanes.run(task);
          parts[p] = t.summary;
          a.progress(++done, files.length);
        }),
      ),
    );
  }
  // Merged in lane order (the merge is exact, so the order does not change the result).
  const finals = gatherFinals(await a.lanes.finish());
  if (a.statsInLanes) {
    const tables = Array.from({ length: a.partCount }, () => new TableStats(a.columns));
    for (const f of finals) if (f?.kind === 'parts') f.parts.forEach((t, p) => tables[p]!.mergeSerialized(t));
    tables.forEach((t, p) => {
      parts[p] = t.summary({ excludeValues: a.excludeValues });
      whole.merge(t);
    });
  } else for (const f of finals) if (f?.kind === 'readBack') whole.mergeSerialized(f.readBack);
  return { parts, input: whole.summary({ excludeValues: a.excludeValues }) };
}

/** Each part's manifest entry. */
export function partRecords(layout: PartInfo[], counts: Float64Array, folds: number, strata: number, closed: { bytes: number; sha256: string }[], fingerprints: Fingerprint[], stats: ColumnSummary[][] | null): PartRecord[] {
  return layout.map((part, p) => {
    const byStratum = new Array<number>(strata).fill(0);
    const byFold = new Array<number>(folds).fill(0);
    const foldStrata: number[][] = Array.from({ length: folds }, () => new Array<number>(strata).fill(0));
    for (let f = 0; f < folds; f++) {
      for (let s = 0; s < strata; s++) {
        const n = counts[(p * folds + f) * strata + s]!;
        byStratum[s]! += n;
        byFold[f]! += n;
        foldStrata[f]![s] = n;
      }
    }
    return {
      path: part.path,
      split: part.split,
      partition: part.partition,
      records: byStratum.reduce((x, y) => x + y, 0),
      bytes: closed[p]!.bytes,
      sha256: closed[p]!.sha256,
      strata: byStratum,
      folds: folds > 1 ? byFold : null,
      foldStrata: folds > 1 ? foldStrata : null,
      fingerprint: fingerprints[p]!.toHex(),
      ...(stats ? { stats: stats[p]! } : {}),
    };
  });
}

/** The folders the parts go in (named splits: one each), in the staging folder. */
export function makePartFolders(stage: string, layout: PartInfo[]): void {
  for (const part of layout) {
    const folder = dirname(join(stage, part.path));
    try {
      mkdirSync(folder, { recursive: true });
    } catch (err) {
      throw systemError(err, folder, 'creating a folder for the parts');
    }
  }
}

/**
 * The parts' fingerprints merged, checked against the input's: stage 2 hashes the records it read
 * back from the spill, and their sum must be what stage 1 read (every record dealt to exactly one
 * part, the spill intact). Never write a manifest that says otherwise; `remedy` says what to do.
 */
export function checkSameRecords(parts: Fingerprint[], input: Fingerprint, remedy: string): Fingerprint {
  const out = new Fingerprint();
  for (const f of parts) out.merge(f);
  if (out.toHex() !== input.toHex() || out.count !== input.count) {
    throw new RowdeckError('RDK_INTERNAL', `the parts hold ${out.count} records (fingerprint ${out.toHex()}) but ${input.count} were read (fingerprint ${input.toHex()}). Nothing was written; ${remedy}`);
  }
  return out;
}
