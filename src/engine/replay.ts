/**
 * `verify --against` replays the seed: the shuffle runs again over the given inputs with the
 * manifest's seed and options, through the very code that wrote the parts, but into writers that
 * only hash (PartWriter without a path: same gathering, same gzip, same sha256). What it would
 * have written is then compared with the manifest and with the files: an edited seed or option,
 * or parts that are not what that seed gives, fail.
 */
import { dirname, resolve } from 'node:path';
import { RowdeckError } from '../errors.js';
import type { ShuffleOptions } from '../options.js';
import { DEALING_SCHEME } from '../core/deal.js';
import type { Manifest } from './manifest.js';
import { runPipeline } from './shuffle.js';

/**
 * Whether this rowdeck can replay the run a manifest describes; the one place to refuse. A
 * manifest of another dealing scheme (version 1 has none: scheme 1, classes interleaved) gives
 * other bytes by design, so it is not replayed.
 */
export function replayable(m: Manifest): { ok: true } | { ok: false; why: string } {
  const scheme = m.dealingScheme ?? 1;
  if (scheme !== DEALING_SCHEME) {
    return { ok: false, why: `the output was written by dealing scheme ${scheme} (${scheme === 1 ? 'rowdeck 0.1' : 'another version'}); this rowdeck deals by scheme ${DEALING_SCHEME} and cannot repeat it` };
  }
  // gzip parts with no level recorded were one gzip stream each: this rowdeck writes members of a
  // fixed size (src/io/gzip-members.ts), other compressed bytes of the same records.
  const o = m.options as { gzip?: boolean; gzipLevel?: number };
  if (o.gzip === true && o.gzipLevel === undefined) {
    return { ok: false, why: 'the gzip parts were written as one gzip stream each (an earlier rowdeck); this rowdeck writes them as members of a fixed size and cannot repeat their compressed bytes' };
  }
  return { ok: true };
}

/** The options of the run the manifest describes, over `inputs` (statistics left out: they do not change the parts). */
export function replayOptions(m: Manifest, inputs: string[], dir: string, extra: { tempDir?: string; threads?: number; memory?: number } = {}): ShuffleOptions {
  const x = m.options as {
    partitions: number;
    stratify: string[];
    tolerance: number;
    folds: number;
    foldColumn: string | null;
    split: { name: string; weight: number }[] | null;
    splitWeightsAreCounts: boolean;
    group: string | null;
    key: string[];
    assign: 'exact' | 'hash' | 'group';
    format: 'csv' | 'tsv' | 'jsonl';
    delimiter: string | null;
    header: boolean;
    gzip: boolean;
    gzipLevel?: number;
    onBadRecord: 'fail' | 'skip' | 'quarantine';
    excludeValues: boolean;
    order?: ShuffleOptions['order'];
  };
  const o: ShuffleOptions = {
    inputs,
    out: dir,
    seed: m.seed ?? undefined,
    partitions: x.partitions,
    stratify: x.stratify,
    format: x.format,
    header: x.header,
    gzip: x.gzip,
    ...(x.gzip && x.gzipLevel !== undefined ? { gzipLevel: x.gzipLevel } : {}),
    onBadRecord: x.onBadRecord,
    excludeValues: x.excludeValues,
  };
  // Hash mode enforces no tolerance, so it takes none.
  if (x.assign !== 'hash') o.tolerance = x.tolerance;
  if (x.delimiter !== null) o.delimiter = x.delimiter;
  if (x.order !== undefined) o.order = x.order;
  if (x.folds > 1) {
    o.folds = x.folds;
    if (x.foldColumn !== null) o.foldColumn = x.foldColumn;
  }
  if (x.split !== null) {
    // The manifest holds the weights as dealt. Record counts are given with the last split as the
    // rest: the same counts whenever the inputs hold the same records. Fractions are written with
    // a decimal point, so a fraction such as 1 or 0 stays a fraction (see parseSplits).
    o.split = x.split
      .map((s, i) => {
        if (x.splitWeightsAreCounts) return `${s.name}=${i === x.split!.length - 1 ? '*' : String(s.weight)}`;
        const w = String(s.weight);
        return `${s.name}=${/^\d+$/.test(w) ? `${w}.0` : w}`;
      })
      .join(',');
  }
  if (x.assign === 'group' && x.group !== null) o.group = x.group;
  if (x.key.length > 0) o.key = x.key;
  if (x.assign === 'hash') o.assign = 'hash';
  if (extra.tempDir !== undefined) o.tempDir = extra.tempDir;
  if (extra.threads !== undefined) o.threads = extra.threads;
  if (extra.memory !== undefined) o.memory = extra.memory;
  return o;
}

/** Runs the shuffle again without writing parts; returns the manifest it would have written. The spill goes beside `dir` unless `tempDir` says otherwise. */
export async function replayShuffle(m: Manifest, inputs: string[], dir: string, extra: { tempDir?: string; threads?: number; memory?: number } = {}): Promise<Manifest> {
  const run = await runPipeline(replayOptions(m, inputs, dir, extra), { sink: 'hash', spillBeside: dirname(resolve(dir)) });
  return run.manifest;
}

/** Codes that say the replay could not run here (the environment), not that the output differs. */
export const REPLAY_ENVIRONMENT_CODES = new Set(['RDK_IO', 'RDK_PERMISSION', 'RDK_DISK_FULL', 'RDK_TOO_MANY_OPEN_FILES', 'RDK_INPUT_NOT_FOUND', 'RDK_INTERNAL']);

export interface ReplayDifference {
  /** A part's path, or `manifest.json`. */
  file: string;
  item: string;
  expected: string | number;
  found: string | number;
}

/**
 * What the replay gives against the manifest (counts, classes, folds, fingerprints, sha256) and
 * against the files read (`files[k]`: size and sha256 of part k as read, or null where it could
 * not be read). Expected is what the seed gives; found is what the manifest or the file holds.
 */
export function compareReplay(m: Manifest, r: Manifest, files: ({ bytes: number; sha256: string } | null)[]): { parts: ReplayDifference[][]; whole: ReplayDifference[] } {
  const whole: ReplayDifference[] = [];
  const text = (v: unknown): string => JSON.stringify(v) ?? 'none';
  const mine = m.output.parts.map((p) => p.path);
  const theirs = r.output.parts.map((p) => p.path);
  if (text(mine) !== text(theirs)) {
    whole.push({ file: 'manifest.json', item: 'parts', expected: cut(text(theirs)), found: cut(text(mine)) });
  }
  const same = (file: string, item: string, expected: unknown, found: unknown, out: ReplayDifference[]): void => {
    if (text(expected) !== text(found)) out.push({ file, item, expected: cut(text(expected)), found: cut(text(found)) });
  };
  same('manifest.json', 'classes', r.strata.values, m.strata.values, whole);
  same('manifest.json', 'records', r.output.records, m.output.records, whole);
  same('manifest.json', 'output fingerprint', r.output.fingerprint, m.output.fingerprint, whole);
  same('manifest.json', 'balance', r.balance.maxDeviation, m.balance.maxDeviation, whole);
  const parts = m.output.parts.map((p, k) => {
    const out: ReplayDifference[] = [];
    const q = r.output.parts.find((x) => x.path === p.path);
    if (!q) {
      out.push({ file: p.path, item: 'part', expected: 'no such part', found: 'listed in the manifest' });
      return out;
    }
    same(p.path, 'records', q.records, p.records, out);
    same(p.path, 'classes', q.strata, p.strata, out);
    same(p.path, 'folds', q.folds, p.folds, out);
    same(p.path, 'fold classes', q.foldStrata, p.foldStrata, out);
    same(p.path, 'fingerprint', q.fingerprint, p.fingerprint, out);
    same(p.path, 'bytes (manifest)', q.bytes, p.bytes, out);
    same(p.path, 'sha256 (manifest)', q.sha256, p.sha256, out);
    const f = files[k];
    if (f) {
      same(p.path, 'bytes (file)', q.bytes, f.bytes, out);
      same(p.path, 'sha256 (file)', q.sha256, f.sha256, out);
    }
    return out;
  });
  return { parts, whole };
}

function cut(t: string): string {
  return t.length > 120 ? `${t.slice(0, 117)}...` : t;
}

/** A replay error as a coded error where it is the environment's fault; null where it means the output differs. */
export function environmentFault(err: unknown): RowdeckError | null {
  return err instanceof RowdeckError && REPLAY_ENVIRONMENT_CODES.has(err.code) ? err : null;
}
