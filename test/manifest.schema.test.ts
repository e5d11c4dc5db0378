/**
 * docs/manifest.schema.json against real manifests: runs in every mode must validate, and
 * manifests broken on purpose must not. The validator is ajv's JSON Schema draft 2020-12 build
 * (an implementation of the published specification, outside this project). The date-time
 * format is RFC 3339 section 5.6 (`full-date "T" full-time`), written here as a regular
 * expression from that grammar.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { gzipSync } from 'node:zlib';
// The named export: the default one is typed as the module itself under NodeNext resolution.
import { Ajv2020, type ErrorObject, type ValidateFunction } from 'ajv/dist/2020.js';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { shuffle, type Manifest, type ShuffleOptions } from '../src/index.js';
import { makeSensorCsv, makeTempDir, parseCsv, removeDir } from './helpers/engine.js';

const SCHEMA_PATH = fileURLToPath(new URL('../docs/manifest.schema.json', import.meta.url));
const DOC_PATH = fileURLToPath(new URL('../docs/manifest.md', import.meta.url));
const EXAMPLE_INPUT = fileURLToPath(new URL('../examples/sensor-readings.csv', import.meta.url));
const schema = JSON.parse(readFileSync(SCHEMA_PATH, 'utf8')) as Record<string, unknown>;

let dir: string;
let input: string;
let validate: ValidateFunction;

beforeAll(() => {
  // strict: unknown keywords, formats or misplaced keywords in the schema are errors, not ignored.
  const ajv = new Ajv2020({ strict: true, allowUnionTypes: true, allErrors: true });
  ajv.addFormat('date-time', /^\d{4}-\d{2}-\d{2}[Tt]\d{2}:\d{2}:\d{2}(?:\.\d+)?(?:[Zz]|[+-]\d{2}:\d{2})$/);
  validate = ajv.compile(schema);
  dir = makeTempDir('rowdeck-schema-');
  input = join(dir, 'readings.csv');
  writeFileSync(input, makeSensorCsv({ rows: 1500, seed: 23, sensors: 40 }));
});
afterAll(() => removeDir(dir));

function errorsOf(m: unknown): ErrorObject[] {
  return validate(m) ? [] : [...(validate.errors ?? [])];
}

async function run(name: string, o: Omit<ShuffleOptions, 'out' | 'inputs'> & { inputs?: string[] }): Promise<Manifest> {
  const out = join(dir, name);
  await shuffle({ inputs: [input], seed: `schema-${name}`, stats: true, ...o, out });
  // The file on disk, not the returned object: that is what others will read.
  return JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as Manifest;
}

describe('real manifests validate', () => {
  const modes: [string, () => Promise<Manifest>][] = [
    ['plain', () => run('plain', {})],
    ['folds', () => run('folds', { partitions: 3, folds: 4, stratify: 'fault' })],
    ['splits', () => run('splits', { split: 'train=1000,valid=300,test=*', stratify: 'fault', folds: 2 })],
    ['group', () => run('group', { partitions: 2, folds: 3, group: 'sensor', stratify: 'fault', tolerance: 2 })],
    ['hash', () => run('hash', { partitions: 3, assign: 'hash', key: 'id' })],
    ['bins', () => run('bins', { partitions: 2, stratify: 'reading:bins=4,fault', tolerance: 1 })],
    ['gzip', () => run('gzip', { partitions: 2, gzip: true, stratify: 'fault' })],
    ['excluded values', () => run('excluded', { partitions: 2, stratify: 'reading:bins=3,fault', folds: 2, excludeValues: true, tolerance: 1 })],
    ['no statistics', () => run('nostats', { partitions: 2, stats: false })],
  ];
  for (const [name, make] of modes) {
    it(name, async () => {
      const m = await make();
      expect(errorsOf(m)).toEqual([]);
    });
  }

  it('JSON Lines, several inputs (one gzip), with folds', async () => {
    const { rows } = parseCsv(readFileSync(input));
    const lines = rows.map((r) => JSON.stringify({ id: Number(r[0]), sensor: r[1], reading: Number(r[3]), fault: r[5] }));
    const a = join(dir, 'a.jsonl');
    const b = join(dir, 'b.jsonl.gz');
    writeFileSync(a, lines.slice(0, 700).join('\n') + '\n');
    writeFileSync(b, gzipSync(lines.slice(700).join('\n') + '\n'));
    const m = await run('jsonl', { inputs: [a, b], partitions: 2, folds: 3, stratify: 'fault', tolerance: 2 });
    expect(m.options.delimiter).toBe(null);
    expect(errorsOf(m)).toEqual([]);
  });

  it('quarantine (rejected records and their file)', async () => {
    const bad = join(dir, 'bad.csv');
    writeFileSync(bad, 'id,fault\n1,ok\n2,ok,extra\n3,drift\n4,ok\n');
    const m = await run('quarantine', { inputs: [bad], onBadRecord: 'quarantine', stratify: 'fault', tolerance: 5 });
    expect(m.input.rejectsFile).toBe('rejected.csv');
    expect(errorsOf(m)).toEqual([]);
  });

  it('the example manifest printed in docs/manifest.md', async () => {
    const block = /```json\n([\s\S]*?)```/.exec(readFileSync(DOC_PATH, 'utf8'))![1]!;
    const m = JSON.parse(block) as Manifest;
    expect(m.output.parts.length).toBe(3);
    expect(errorsOf(m)).toEqual([]);
    // And it is what the command shown there writes (the run block and the input path aside).
    const real = await run('doc-example', { inputs: [EXAMPLE_INPUT], partitions: 3, stratify: 'fault', seed: 'field-season-2025', stats: false });
    const strip = (x: Manifest): unknown => ({ ...x, run: null, input: { ...x.input, files: x.input.files.map((f) => ({ ...f, path: null })) } });
    expect(strip(real), 'docs/manifest.md: the example is out of date; run the command shown there and copy the new values in').toEqual(strip(m));
  });

  it('the manifest of the example run (npm run example) on the shipped data', async () => {
    // The same options as the package.json "example" script; examples/out itself is not committed.
    const m = await shuffle({ inputs: [EXAMPLE_INPUT], out: join(dir, 'example-out'), partitions: 4, stratify: 'fault', folds: 5 });
    expect(errorsOf(JSON.parse(readFileSync(join(dir, 'example-out', 'manifest.json'), 'utf8')))).toEqual([]);
    expect(m.input.records).toBe(3917);
  });
});

describe('broken manifests are rejected', () => {
  let good: Manifest;
  beforeAll(async () => {
    good = await run('tobreak', { partitions: 2, folds: 2, stratify: 'fault' });
  });
  const broken = (edit: (m: Record<string, any>) => void): unknown => {
    const m = structuredClone(good) as Record<string, any>;
    edit(m);
    return m;
  };
  const has = (errs: ErrorObject[], instancePath: string, keyword: string): boolean => errs.some((e) => e.instancePath === instancePath && e.keyword === keyword);

  it('starts from a manifest that validates', () => {
    expect(errorsOf(good)).toEqual([]);
  });

  it('a missing key', () => {
    const errs = errorsOf(broken((m) => delete m.output.fingerprint));
    expect(errs.find((e) => e.keyword === 'required')).toMatchObject({ instancePath: '/output', params: { missingProperty: 'fingerprint' } });
    expect(has(errorsOf(broken((m) => delete m.output.parts[1].foldStrata)), '/output/parts/1', 'required')).toBe(true);
  });

  it('a wrong type', () => {
    expect(has(errorsOf(broken((m) => (m.output.parts[0].records = String(m.output.parts[0].records)))), '/output/parts/0/records', 'type')).toBe(true);
    expect(has(errorsOf(broken((m) => (m.input.records = 1.5))), '/input/records', 'type')).toBe(true);
    expect(has(errorsOf(broken((m) => (m.seedIsDefault = 'no'))), '/seedIsDefault', 'type')).toBe(true);
  });

  it('hex digests of the wrong form', () => {
    expect(has(errorsOf(broken((m) => (m.output.parts[0].sha256 = m.output.parts[0].sha256.toUpperCase()))), '/output/parts/0/sha256', 'pattern')).toBe(true);
    expect(has(errorsOf(broken((m) => (m.input.fingerprint = m.input.fingerprint.slice(1)))), '/input/fingerprint', 'pattern')).toBe(true);
  });

  it('an unknown key, a value outside its enum, a part path leaving the folder, a bad time', () => {
    expect(has(errorsOf(broken((m) => (m.options.shuffleTwice = true))), '/options', 'additionalProperties')).toBe(true);
    expect(has(errorsOf(broken((m) => (m.options.assign = 'random'))), '/options/assign', 'enum')).toBe(true);
    expect(has(errorsOf(broken((m) => (m.output.parts[0].path = '../elsewhere.csv'))), '/output/parts/0/path', 'pattern')).toBe(true);
    expect(has(errorsOf(broken((m) => (m.output.parts[0].path = '/etc/passwd'))), '/output/parts/0/path', 'pattern')).toBe(true);
    expect(has(errorsOf(broken((m) => (m.run.createdAt = '1 December 2026'))), '/run/createdAt', 'format')).toBe(true);
    expect(has(errorsOf(broken((m) => (m.manifestVersion = 3))), '/manifestVersion', 'const')).toBe(true);
  });

  it('a gzip level without gzip parts, or outside 1..9', () => {
    // The plain manifest has no level; gzip ones carry it (the real gzip run above validates).
    expect(good.options).not.toHaveProperty('gzipLevel');
    expect(has(errorsOf(broken((m) => (m.options.gzipLevel = 6))), '/options/gzipLevel', 'false schema')).toBe(true);
    const gz = (level: unknown) => broken((m) => Object.assign(m.options, { gzip: true, gzipLevel: level }));
    expect(errorsOf(gz(9))).toEqual([]);
    expect(has(errorsOf(gz(0)), '/options/gzipLevel', 'minimum')).toBe(true);
    expect(has(errorsOf(gz(10)), '/options/gzipLevel', 'maximum')).toBe(true);
    expect(has(errorsOf(gz(6.5)), '/options/gzipLevel', 'type')).toBe(true);
  });

  it('a statistics entry that is not a column summary', () => {
    const errs = errorsOf(broken((m) => delete m.input.stats[0].sd));
    expect(has(errs, '/input/stats/0', 'required')).toBe(true);
    expect(has(errorsOf(broken((m) => (m.output.parts[0].stats[1].type = 'float'))), '/output/parts/0/stats/1/type', 'enum')).toBe(true);
  });
});

/** Every object schema in the tree, with its JSON pointer. */
function objectSchemas(node: unknown, at = '#'): [string, Record<string, unknown>][] {
  if (typeof node !== 'object' || node === null) return [];
  const out: [string, Record<string, unknown>][] = [];
  const n = node as Record<string, unknown>;
  if (n.type === 'object') out.push([at, n]);
  for (const [k, v] of Object.entries(n)) {
    if (Array.isArray(v)) v.forEach((x, i) => out.push(...objectSchemas(x, `${at}/${k}/${i}`)));
    else out.push(...objectSchemas(v, `${at}/${k}`));
  }
  return out;
}

describe('the schema is closed and documented', () => {
  it('every object has a fixed shape: additionalProperties false, every listed key required', () => {
    const objs = objectSchemas(schema);
    expect(objs.length).toBeGreaterThan(15);
    for (const [at, o] of objs) {
      expect(o.additionalProperties, at).toBe(false);
      if (o.properties) {
        // stats: absent when statistics are turned off; gzipLevel: present only with gzip parts;
        // spillBytes: absent for a plan's run.
        const optional = ['stats', 'gzipLevel', 'spillBytes'];
        const keys = Object.keys(o.properties as object).filter((k) => !optional.includes(k));
        expect([...((o.required as string[]) ?? [])].sort(), at).toEqual(keys.sort());
      }
    }
  });

  it('docs/manifest.md names every field, and the top-level sections in manifest order', () => {
    const doc = readFileSync(DOC_PATH, 'utf8');
    const names = new Set<string>();
    for (const [, o] of objectSchemas(schema)) for (const k of Object.keys((o.properties as object) ?? {})) names.add(k);
    for (const k of names) expect(doc, k).toContain(`\`${k}\``);
    // Each top-level key is named in a heading, and the headings follow the manifest's order.
    const headings = doc.split('\n').filter((l) => l.startsWith('#'));
    const top = Object.keys(schema.properties as object);
    const at = top.map((k) => headings.findIndex((h) => h.includes(`\`${k}\``)));
    expect(at.every((x) => x >= 0), `headings for: ${top.join(', ')}`).toBe(true);
    expect([...at].sort((a, b) => a - b)).toEqual(at);
  });
});
