/**
 * The command line as built: dist/cli/main.cjs (the bin; dist/cli/main.js is the same entry as an
 * ES module) runs the bundle (dist/cli/rowdeck.cjs) from V8's code cache of it, made by
 * scripts/bundle.mjs. The cache must be the one V8 takes for the text the
 * entry compiles (a cache of other text is refused, silently, and every start pays the compile),
 * and a missing or foreign cache must still run. `npm test` builds dist first.
 */
import { spawnSync, type SpawnSyncReturns } from 'node:child_process';
import { copyFileSync, mkdirSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';

const root = fileURLToPath(new URL('..', import.meta.url));
const cli = join(root, 'dist', 'cli');
const version = (JSON.parse(readFileSync(join(root, 'package.json'), 'utf8')) as { version: string }).version;
const dirs: string[] = [];
afterAll(() => dirs.forEach((d) => rmSync(d, { recursive: true, force: true })));

/** Compiles the bundle as the entry does, in a fresh Node (the test runner's flags would make V8 refuse any cache). */
function cacheState(bundle: string): string {
  const code = `import(${JSON.stringify(join(cli, 'code-cache.js'))}).then((m) => process.stdout.write(m.compileBundle(${JSON.stringify(bundle)}).cache))`;
  const r = spawnSync(process.execPath, ['-e', code], { encoding: 'utf8' });
  expect(r.stderr).toBe('');
  return r.stdout;
}

/** A copy of the built command line in a folder of its own, laid out as in the package. */
function copyOfCli(): string {
  const d = mkdtempSync(join(tmpdir(), 'rowdeck-cache-'));
  dirs.push(d);
  mkdirSync(join(d, 'dist', 'cli'), { recursive: true });
  copyFileSync(join(root, 'package.json'), join(d, 'package.json'));
  for (const f of ['main.cjs', 'main.js', 'code-cache.js', 'rowdeck.cjs', 'rowdeck.cjs.cache']) copyFileSync(join(cli, f), join(d, 'dist', 'cli', f));
  return join(d, 'dist', 'cli');
}

describe('the code cache of the command line', () => {
  it('is taken by V8 for the bundle as the entry compiles it', () => {
    expect(cacheState(join(cli, 'rowdeck.cjs'))).toBe('used');
  });

  it('is refused for a bundle changed after it was made, and the command still runs', () => {
    const copy = copyOfCli();
    // One byte of the text changed, in the comment the entry's #! line became (the code is the
    // same): V8 checks the source.
    const text = readFileSync(join(copy, 'rowdeck.cjs'), 'latin1');
    expect(text.startsWith('///usr/bin/env node')).toBe(true);
    writeFileSync(join(copy, 'rowdeck.cjs'), text.replace('///usr/bin/env node', '///usr/bin/env nodE'), 'latin1');
    expect(cacheState(join(copy, 'rowdeck.cjs'))).toBe('refused');
    const r = spawnSync(process.execPath, [join(copy, 'main.cjs'), '--version'], { encoding: 'utf8' });
    expect(r.status).toBe(0);
    expect(r.stdout).toBe(`rowdeck ${version}\n`);
  });

  it('runs without a cache file, and with one that is not a cache', () => {
    const copy = copyOfCli();
    rmSync(join(copy, 'rowdeck.cjs.cache'));
    expect(cacheState(join(copy, 'rowdeck.cjs'))).toBe('none');
    let r = spawnSync(process.execPath, [join(copy, 'main.cjs'), '--version'], { encoding: 'utf8' });
    expect(r.stdout).toBe(`rowdeck ${version}\n`);
    writeFileSync(join(copy, 'rowdeck.cjs.cache'), 'not a cache');
    expect(cacheState(join(copy, 'rowdeck.cjs'))).toBe('refused');
    r = spawnSync(process.execPath, [join(copy, 'main.cjs'), '--version'], { encoding: 'utf8' });
    expect(r.status).toBe(0);
    expect(r.stdout).toBe(`rowdeck ${version}\n`);
  });

  it('runs the bundle with the command line\'s exit codes and streams (a usage error: 2, on stderr)', () => {
    const r = spawnSync(process.execPath, [join(cli, 'main.cjs'), 'shuffle'], { encoding: 'utf8' });
    expect(r.status).toBe(2);
    expect(r.stdout).toBe('');
    expect(r.stderr).toMatch(/^rowdeck: error RDK_/);
  });

  it('runs from either entry: main.cjs (the bin, CommonJS) and main.js (an ES module), the same output', () => {
    const bin = (JSON.parse(readFileSync(join(root, 'package.json'), 'utf8')) as { bin: Record<string, string> }).bin.rowdeck;
    expect(bin).toBe('dist/cli/main.cjs');
    // CommonJS: the file has no import statement and requires what it uses.
    const text = readFileSync(join(cli, 'main.cjs'), 'utf8');
    expect(text).not.toMatch(/^\s*import\s/m);
    expect(text).toMatch(/require\("node:vm"\)/);
    // The help names the memory available now, which moves between two runs: the same help but
    // for that figure, and the same usage error, word for word.
    const run = (args: string[]): [SpawnSyncReturns<string>, SpawnSyncReturns<string>] => ['main.cjs', 'main.js'].map((f) => spawnSync(process.execPath, [join(cli, f), ...args], { encoding: 'utf8' })) as [SpawnSyncReturns<string>, SpawnSyncReturns<string>];
    const [cjs, esm] = run(['shuffle', '--help']);
    expect([cjs.status, esm.status]).toEqual([0, 0]);
    expect(cjs.stdout).toMatch(/--stratify/);
    const steady = (t: string): string => t.replace(/here now: \d+MiB/, 'here now: …');
    expect(steady(esm.stdout)).toBe(steady(cjs.stdout));
    const [cjsBad, esmBad] = run(['shuffle']);
    expect([cjsBad.status, esmBad.status]).toEqual([2, 2]);
    expect(cjsBad.stderr).toMatch(/^rowdeck: error RDK_/);
    expect(esmBad.stderr).toBe(cjsBad.stderr);
  });

  it('is of a bundle that is ASCII only (read as a one-byte string, not decoded from UTF-8)', () => {
    const bytes = readFileSync(join(cli, 'rowdeck.cjs'));
    expect(bytes.every((b) => b < 0x80)).toBe(true);
    // The help's non-ASCII characters survive the escaping.
    const r = spawnSync(process.execPath, [join(cli, 'main.cjs'), '--help'], { encoding: 'utf8' });
    expect(r.stdout).toMatch(/[^\x00-\x7f]/);
  });
});
