/**
 * manifest.json read and checked into a typed Manifest: a folder that cannot be checked at all
 * (no manifest, or one that is not a manifest) stops verify here with one clear message.
 */
import { readFileSync, statSync } from 'node:fs';
import { isAbsolute, join, normalize } from 'node:path';
import { RowdeckError } from '../../errors.js';
import { DEALING_SCHEME } from '../../core/deal.js';
import { MANIFEST_VERSION, type Manifest } from '../manifest.js';

export function loadManifest(dir: string): Manifest {
  const path = join(dir, 'manifest.json');
  let text: string;
  try {
    text = readFileSync(path, 'utf8');
  } catch (err) {
    const code = (err as NodeJS.ErrnoException).code;
    let kind: 'folder' | 'other' | 'missing' = 'missing';
    try {
      kind = statSync(dir).isDirectory() ? 'folder' : 'other';
    } catch {
      // Not there (or not reachable): said below.
    }
    if (kind === 'other') throw new RowdeckError('RDK_MANIFEST', `${dir}: not a folder (a file). Give the folder rowdeck shuffle wrote its parts to (its --out), not one of its files.`, { file: dir });
    if (kind === 'missing') throw new RowdeckError('RDK_MANIFEST', `${dir}: no such folder. Give the folder rowdeck shuffle wrote its parts to (its --out).`, { file: dir });
    if (code === 'ENOENT') {
      throw new RowdeckError('RDK_MANIFEST', `${path}: no such file. Give the folder rowdeck shuffle wrote (its --out); a run that failed or was interrupted leaves no manifest, so run it again.`, { file: path });
    }
    throw new RowdeckError('RDK_MANIFEST', `${path}: cannot be read (${(err as Error).message}). Check its permissions.`, { file: path, errno: code });
  }
  let raw: unknown;
  try {
    raw = JSON.parse(text);
  } catch (err) {
    throw new RowdeckError('RDK_MANIFEST', `${path}: not valid JSON (${(err as Error).message}). It was edited or cut short; run rowdeck shuffle again to write a new one.`, { file: path });
  }
  checkManifestShape(raw, path);
  return raw;
}

/**
 * Checks that the fields verify relies on are there with the right types, so a damaged manifest
 * gives one clear message instead of a crash halfway. (docs/manifest.schema.json is the full
 * description; this is its load-bearing subset.)
 */
function checkManifestShape(raw: unknown, path: string): asserts raw is Manifest {
  const fail = (field: string, want: string): never => {
    throw new RowdeckError('RDK_MANIFEST', `${path}: field "${field}" should be ${want}. The manifest is damaged or was edited; run rowdeck shuffle again to write a new one.`, { file: path, field });
  };
  const obj = (v: unknown, field: string): Record<string, unknown> => (typeof v === 'object' && v !== null && !Array.isArray(v) ? (v as Record<string, unknown>) : fail(field, 'an object'));
  const arr = (v: unknown, field: string): unknown[] => (Array.isArray(v) ? v : fail(field, 'an array'));
  const count = (v: unknown, field: string): number => (typeof v === 'number' && Number.isSafeInteger(v) && v >= 0 ? v : fail(field, 'a whole number ≥ 0'));
  const str = (v: unknown, field: string): string => (typeof v === 'string' ? v : fail(field, 'a string'));
  const hex = (v: unknown, field: string, len: number): string => (typeof v === 'string' && new RegExp(`^[0-9a-f]{${len}}$`).test(v) ? v : fail(field, `${len} lowercase hex digits`));
  const strings = (v: unknown, field: string): string[] => arr(v, field).map((x, i) => str(x, `${field}[${i}]`));

  const m = obj(raw, '(top level)');
  if (m.manifestVersion !== 1 && m.manifestVersion !== MANIFEST_VERSION) {
    throw new RowdeckError(
      'RDK_MANIFEST',
      `${path}: manifestVersion is ${JSON.stringify(m.manifestVersion)}; this rowdeck reads versions 1 to ${MANIFEST_VERSION}. ${typeof m.manifestVersion === 'number' && m.manifestVersion > MANIFEST_VERSION ? 'Use the rowdeck version that wrote it, or a newer one.' : 'The file is not a rowdeck manifest, or is damaged.'}`,
      { file: path, field: 'manifestVersion' },
    );
  }
  if (m.manifestVersion !== 1 && m.dealingScheme !== DEALING_SCHEME) fail('dealingScheme', String(DEALING_SCHEME));
  const o = obj(m.options, 'options');
  if (!['csv', 'tsv', 'jsonl'].includes(o.format as string)) fail('options.format', '"csv", "tsv" or "jsonl"');
  if (o.delimiter !== null && typeof o.delimiter !== 'string') fail('options.delimiter', 'a string or null');
  if (typeof o.header !== 'boolean') fail('options.header', 'true or false');
  strings(o.stratify, 'options.stratify');
  count(o.folds, 'options.folds');
  if (typeof o.excludeValues !== 'boolean') fail('options.excludeValues', 'true or false');
  if (!['fail', 'skip', 'quarantine'].includes(o.onBadRecord as string)) fail('options.onBadRecord', '"fail", "skip" or "quarantine"');

  const input = obj(m.input, 'input');
  strings(input.columns, 'input.columns');
  arr(input.files, 'input.files').forEach((f, i) => {
    const x = obj(f, `input.files[${i}]`);
    str(x.path, `input.files[${i}].path`);
    count(x.records, `input.files[${i}].records`);
  });
  count(input.records, 'input.records');
  count(input.rejected, 'input.rejected');
  if (input.rejectsFile !== null) safePath(str(input.rejectsFile, 'input.rejectsFile'), 'input.rejectsFile', path);
  hex(input.fingerprint, 'input.fingerprint', 16);

  const strata = obj(m.strata, 'strata');
  const columns = strings(strata.columns, 'strata.columns');
  const values = arr(strata.values, 'strata.values');
  values.forEach((v, i) => {
    const x = obj(v, `strata.values[${i}]`);
    count(x.records, `strata.values[${i}].records`);
    if (x.value !== null) {
      const vals = arr(x.value, `strata.values[${i}].value`);
      if (vals.length !== columns.length) fail(`strata.values[${i}].value`, `an array of ${columns.length} value(s), one per column of strata.columns`);
      vals.forEach((y, j) => y !== null && str(y, `strata.values[${i}].value[${j}]`));
    }
  });
  arr(strata.bins, 'strata.bins').forEach((b, i) => {
    const x = obj(b, `strata.bins[${i}]`);
    str(x.column, `strata.bins[${i}].column`);
    arr(x.edges, `strata.bins[${i}].edges`).forEach((e, j) => typeof e === 'number' || fail(`strata.bins[${i}].edges[${j}]`, 'a number'));
  });
  if (strings(o.stratify, 'options.stratify').length !== columns.length) fail('options.stratify', `a list as long as strata.columns (${columns.length})`);

  const balance = obj(m.balance, 'balance');
  if (typeof balance.tolerance !== 'number') fail('balance.tolerance', 'a number');
  if (typeof balance.maxDeviation !== 'number') fail('balance.maxDeviation', 'a number');

  const output = obj(m.output, 'output');
  count(output.records, 'output.records');
  hex(output.fingerprint, 'output.fingerprint', 16);
  if (output.foldColumn !== null) str(output.foldColumn, 'output.foldColumn');
  if ((o.folds as number) > 1 && output.foldColumn === null) fail('output.foldColumn', `a column name (options.folds is ${String(o.folds)})`);
  const parts = arr(output.parts, 'output.parts');
  if (parts.length === 0) fail('output.parts', 'a non-empty array');
  parts.forEach((p, i) => {
    const f = `output.parts[${i}]`;
    const x = obj(p, f);
    safePath(str(x.path, `${f}.path`), `${f}.path`, path);
    if (x.split !== null) str(x.split, `${f}.split`);
    count(x.records, `${f}.records`);
    count(x.bytes, `${f}.bytes`);
    hex(x.sha256, `${f}.sha256`, 64);
    hex(x.fingerprint, `${f}.fingerprint`, 16);
    arr(x.strata, `${f}.strata`).forEach((n, j) => count(n, `${f}.strata[${j}]`));
    if (x.folds !== null) arr(x.folds, `${f}.folds`).forEach((n, j) => count(n, `${f}.folds[${j}]`));
    if (x.foldStrata !== null) arr(x.foldStrata, `${f}.foldStrata`).forEach((row, g) => arr(row, `${f}.foldStrata[${g}]`).forEach((n, j) => count(n, `${f}.foldStrata[${g}][${j}]`)));
  });
}

/** A part path must stay inside the folder: verify reads only what the run wrote. */
function safePath(p: string, field: string, path: string): void {
  if (p === '' || isAbsolute(p) || normalize(p).split(/[\\/]/).includes('..')) {
    throw new RowdeckError('RDK_MANIFEST', `${path}: field "${field}" is ${JSON.stringify(p)}, which points outside the output folder. The manifest was edited; run rowdeck shuffle again.`, { file: path, field });
  }
}

