/**
 * `verify --against` replays the seed: the shuffle runs again from the manifest's seed and
 * options, through the real writing path but writing nothing, and the parts must be exactly what
 * it gives. Checked in every mode (the replay passes on an untouched output), and against edits
 * the plain checks cannot see: a seed or an option changed in the manifest, and records reordered
 * inside a part with the manifest's sha256 brought up to date (counts and the order-independent
 * fingerprints still agree, so only the replay can tell).
 */
import { createHash } from 'node:crypto';
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { shuffle } from '../src/engine/shuffle.js';
import { verify } from '../src/engine/verify.js';
import type { ShuffleOptions } from '../src/options.js';
import { makeSensorCsv, makeTempDir, removeDir } from './helpers/engine.js';
import { diffSnapshots, runRowdeck, snapshot } from './helpers/safety.js';

let dir: string;
let input: string;
let second: string;
let jsonl: string;

beforeAll(() => {
  dir = makeTempDir('rowdeck-replay-');
  input = join(dir, 'readings.csv');
  second = join(dir, 'more.csv');
  jsonl = join(dir, 'readings.jsonl');
  writeFileSync(input, makeSensorCsv({ rows: 3000, seed: 21 }));
  writeFileSync(second, makeSensorCsv({ rows: 1000, seed: 22 }));
  writeFileSync(jsonl, Array.from({ length: 1500 }, (_, i) => JSON.stringify({ id: i, sensor: `S${i % 30}`, fault: ['ok', 'ok', 'drift', 'spike'][i % 4] })).join('\n') + '\n');
});
afterAll(() => removeDir(dir));

const MODES: [string, () => Omit<ShuffleOptions, 'out'>][] = [
  ['partitions', () => ({ inputs: [input], partitions: 3 })],
  ['stratified, with folds', () => ({ inputs: [input], partitions: 2, stratify: 'fault', folds: 4, seed: 'north' })],
  ['splits as fractions, with partitions', () => ({ inputs: [input], split: 'train=0.7,valid=0.2,test=0.1', partitions: 2, stratify: 'fault' })],
  ['splits as counts with the rest', () => ({ inputs: [input], split: 'train=2000,test=*', stratify: 'fault' })],
  ['groups', () => ({ inputs: [input], group: 'sensor', partitions: 3 })],
  ['hash assignment by key', () => ({ inputs: [input], assign: 'hash', key: 'id', partitions: 3 })],
  ['JSON Lines with folds', () => ({ inputs: [jsonl], stratify: 'fault', folds: 3 })],
  ['gzip parts', () => ({ inputs: [input], partitions: 2, gzip: true })],
  ['quantile bins', () => ({ inputs: [input], stratify: 'reading:bins=4', partitions: 2 })],
  ['several inputs', () => ({ inputs: [input, second], partitions: 2, stratify: 'fault' })],
  ['values left out of the manifest', () => ({ inputs: [input], stratify: 'fault', partitions: 2, excludeValues: true })],
  ['bad records set aside', () => ({ inputs: [join(dir, 'with-bad.csv')], partitions: 2, onBadRecord: 'quarantine' })],
  ['classes spread evenly inside parts', () => ({ inputs: [input], partitions: 2, stratify: 'fault', order: 'spread' })],
  ['groups kept together inside parts', () => ({ inputs: [input], group: 'sensor', partitions: 2, order: 'grouped' })],
];

describe('the replay passes on an untouched output, in every mode', () => {
  it.each(MODES)('%s', async (name, options) => {
    if (name === 'bad records set aside') writeFileSync(join(dir, 'with-bad.csv'), readFileSync(input, 'utf8') + '1,2\n"open,3\n');
    const out = join(dir, `mode-${name.replace(/\W+/g, '-')}`);
    const o = options();
    await shuffle({ ...o, out });
    const before = snapshot(dir);
    const r = await verify({ dir: out, against: o.inputs });
    expect(r.mismatches).toEqual([]);
    expect(r.replay).toMatchObject({ status: 'passed', note: expect.stringContaining('gives exactly these parts') });
    expect(r.checks.filter((c) => c.check === 'replay').every((c) => c.status === 'passed')).toBe(true);
    // The replay writes nothing (its spill came and went).
    expect(diffSnapshots(before, snapshot(dir))).toEqual([]);
  });
});

describe('edits only the replay can see', () => {
  let out: string;
  let pristine: string;
  beforeAll(async () => {
    out = join(dir, 'edited');
    await shuffle({ inputs: [input], out, partitions: 3, stratify: 'fault', folds: 3, seed: 'field-season' });
    pristine = readFileSync(join(out, 'manifest.json'), 'utf8');
  });
  const editManifest = (edit: (m: Record<string, any>) => void): void => {
    const m = JSON.parse(pristine) as Record<string, any>;
    edit(m);
    writeFileSync(join(out, 'manifest.json'), JSON.stringify(m, null, 2) + '\n');
  };

  it.each([
    ['the seed', (m: Record<string, any>) => (m.seed = 'field-season-2')],
    ['options.partitions', (m: Record<string, any>) => (m.options.partitions = 4)],
    ['options.stratify', (m: Record<string, any>) => (m.options.stratify = ['site'])],
    ['options.folds', (m: Record<string, any>) => (m.options.folds = 2)],
  ])('%s edited: the plain checks pass, the replay fails', async (_what, edit) => {
    editManifest(edit);
    try {
      const plain = await verify({ dir: out, against: [input], replay: false });
      // Not every edit leaves the plain checks whole (the fold count is checked), but the seed and
      // the partition count are invisible to them.
      const r = await verify({ dir: out, against: [input] });
      expect(r.ok).toBe(false);
      expect(r.replay?.status).toBe('failed');
      expect(r.mismatches.some((x) => x.check === 'replay')).toBe(true);
      if (_what === 'the seed' || _what === 'options.partitions' || _what === 'options.stratify') expect(plain.ok).toBe(true);
    } finally {
      writeFileSync(join(out, 'manifest.json'), pristine);
    }
  });

  it('records reordered inside a part, its sha256 brought up to date in the manifest: only the replay fails', async () => {
    const part = join(out, 'part-00001.csv');
    const text = readFileSync(part, 'utf8');
    try {
      // Move the last record to the front (simple lines in this data: no quoted line breaks at the ends).
      const lines = text.trimEnd().split('\n');
      const [header, ...records] = lines;
      const moved = [header, records[records.length - 1], ...records.slice(0, -1)].join('\n') + '\n';
      expect(moved.length).toBe(text.length);
      writeFileSync(part, moved);
      const sha = createHash('sha256').update(moved).digest('hex');
      editManifest((m) => (m.output.parts[1].sha256 = sha));
      const plain = await verify({ dir: out, against: [input], replay: false });
      expect(plain.ok).toBe(true);
      const r = await verify({ dir: out, against: [input] });
      expect(r.ok).toBe(false);
      expect(r.mismatches.filter((x) => x.check === 'replay').map((x) => `${x.file} ${x.item}`)).toEqual(['part-00001.csv sha256 (manifest)', 'part-00001.csv sha256 (file)']);
      // The command line says so.
      const cli = await runRowdeck(['verify', out, '--against', input], { cwd: dir });
      expect(cli.status).toBe(1);
      expect(cli.stderr).toContain('replay failed: the parts or the manifest are not what seed "field-season" with the manifest\'s options gives');
    } finally {
      writeFileSync(part, text);
      writeFileSync(join(out, 'manifest.json'), pristine);
    }
  });

  it('a manifest of dealing scheme 1 (version 1) is not replayed, and the report says why', async () => {
    try {
      editManifest((m) => {
        m.manifestVersion = 1;
        delete m.dealingScheme;
        delete m.options.order;
      });
      const r = await verify({ dir: out, against: [input] });
      expect(r.replay).toMatchObject({ status: 'skipped', note: expect.stringContaining('dealing scheme 1 (rowdeck 0.1)') });
      expect(r.checks).toContainEqual(expect.objectContaining({ file: '(replay)', check: 'replay', status: 'skipped' }));
    } finally {
      writeFileSync(join(out, 'manifest.json'), pristine);
    }
  });

  it('standard input cannot be read twice: the replay is skipped, and says why', async () => {
    const cli = await runRowdeck(['verify', out, '--against', '-', '--json'], { cwd: dir, input: readFileSync(input, 'utf8') });
    expect(cli.status, cli.stderr).toBe(0);
    const report = JSON.parse(cli.stdout) as { replay: { status: string; note: string } };
    expect(report.replay).toMatchObject({ status: 'skipped', note: 'standard input or a pipe can be read only once' });
    const ok = await runRowdeck(['verify', out, '--against', input], { cwd: dir });
    expect(ok.status, ok.stderr).toBe(0);
    expect(ok.stderr).toContain('replay passed: the shuffle run again with seed "field-season" and the manifest\'s options gives exactly these parts');
  });
});
