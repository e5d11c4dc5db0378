/**
 * The ROWDECK_* switches live in one place (src/flags.ts) and are documented in one place
 * (DEVELOPERS.md's table, made from FLAG_SPECS by scripts/flags-table.mjs): every name used
 * anywhere in the repository has a spec, only flags.ts reads the environment, each spec names the
 * files that read it, and the table is what the specs make.
 */
import { readdirSync, readFileSync, statSync } from 'node:fs';
import { join, relative } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterEach, describe, expect, it } from 'vitest';
import { FLAG_SPECS, flags, readFlags, setFlag, twinSwitch, type WasmModuleName } from '../src/flags.js';
import { BEGIN, END, flagsTable, withTable } from '../scripts/flags-table.mjs';

const root = fileURLToPath(new URL('..', import.meta.url));
const SKIP = new Set(['node_modules', 'dist', '.git', 'coverage']);

/** Text files of the repository (relative paths), outside node_modules, dist and .git. */
function repoFiles(dir = root): string[] {
  const out: string[] = [];
  for (const name of readdirSync(dir)) {
    if (SKIP.has(name)) continue;
    const path = join(dir, name);
    if (statSync(path).isDirectory()) out.push(...repoFiles(path));
    else if (/\.(ts|mts|mjs|js|md|json|sh)$/.test(name) || name === 'run') out.push(relative(root, path));
  }
  return out;
}
const files = repoFiles();
const text = (f: string): string => readFileSync(join(root, f), 'utf8');

describe('one place for the switches', () => {
  it('every ROWDECK_* name in the repository has a spec in src/flags.ts', () => {
    const known = new Set(FLAG_SPECS.map((s) => s.name));
    const unknown: string[] = [];
    for (const f of files) for (const m of text(f).matchAll(/\bROWDECK_[A-Z_]+[A-Z]\b/g)) if (!known.has(m[0] as never)) unknown.push(`${f}: ${m[0]}`);
    expect(unknown).toEqual([]);
    expect(new Set(FLAG_SPECS.map((s) => s.key)).size).toBe(FLAG_SPECS.length);
  });

  it('only src/flags.ts reads the environment for them (code elsewhere reads `flags`)', () => {
    const readers = files.filter((f) => /^(src|scripts|bench)\/|^test\/helpers\//.test(f) && f !== 'src/flags.ts')
      .filter((f) => /process\.env\.ROWDECK_|process\.env\[/.test(text(f)));
    expect(readers).toEqual([]);
  });

  it("each spec's readBy is the list of files that read its field of `flags`", () => {
    const code = files.filter((f) => /^(src|scripts|bench)\/.*\.(ts|mjs)$|^test\/helpers\/.*\.ts$/.test(f) && f !== 'src/flags.ts');
    for (const spec of FLAG_SPECS) {
      const readers = code.filter((f) => new RegExp(`\\bflags\\.${spec.key}\\b`).test(text(f)));
      expect(readers.sort(), spec.name).toEqual([...spec.readBy].sort());
    }
  });

  it("DEVELOPERS.md's table is the one the specs make (node scripts/flags-table.mjs rewrites it)", () => {
    const doc = text('DEVELOPERS.md');
    expect(doc.split(BEGIN).length, 'one table').toBe(2);
    expect(doc.split(END).length, 'one table').toBe(2);
    const table = flagsTable(FLAG_SPECS);
    expect(withTable(doc, table)).toBe(doc);
    for (const spec of FLAG_SPECS) expect(table).toContain(`| \`${spec.name}\` |`);
  });

  it('each WebAssembly module has the switch that selects its JavaScript twin', () => {
    const modules: WasmModuleName[] = ['structural', 'jsonl', 'spill', 'gather', 'sort', 'stats'];
    expect(modules.map(twinSwitch)).toEqual(['ROWDECK_SCAN', 'ROWDECK_JSONL', 'ROWDECK_SPILL', 'ROWDECK_GATHER', 'ROWDECK_SORT', 'ROWDECK_STATS']);
    for (const m of modules) expect(readFlags({ [twinSwitch(m)]: 'js' })[FLAG_SPECS.find((s) => s.module === m)!.key]).toBe('js');
  });
});

describe('reading the switches', () => {
  afterEach(() => {
    // The tests below put back what they set; this checks they did.
    expect(flags).toEqual(readFlags(process.env));
  });

  it('unset: every module where it runs, sizes chosen by the engine', () => {
    expect(readFlags({})).toEqual({
      scan: 'auto', jsonl: 'auto', spill: 'auto', gather: 'auto', sort: 'auto', stats: 'auto', phases: false,
      bucketBits: undefined, layout: undefined, memoryStore: 'auto', partStats: 'auto', blockBytes: undefined, lookaheadBytes: undefined, openParts: undefined, runsDir: undefined,
      chromium: undefined,
    });
  });

  it('reads each documented value', () => {
    const f = readFlags({
      ROWDECK_SCAN: 'simd', ROWDECK_JSONL: 'js', ROWDECK_SPILL: 'js', ROWDECK_GATHER: 'js', ROWDECK_SORT: 'js', ROWDECK_STATS: 'js', ROWDECK_PHASES: '1',
      ROWDECK_BUCKET_BITS: '0', ROWDECK_LAYOUT: 'multi-pass', ROWDECK_MEMORY_STORE: 'shared', ROWDECK_PART_STATS: 'files', ROWDECK_BLOCK_BYTES: '4096', ROWDECK_LOOKAHEAD_BYTES: '512', ROWDECK_OPEN_PARTS: '100000',
      ROWDECK_RUNS_DIR: '/tmp/runs', ROWDECK_CHROMIUM: '/opt/chromium',
    });
    expect(f).toEqual({
      scan: 'simd', jsonl: 'js', spill: 'js', gather: 'js', sort: 'js', stats: 'js', phases: true,
      bucketBits: 0, layout: 'multi-pass', memoryStore: 'shared', partStats: 'files', blockBytes: 4096, lookaheadBytes: 512, openParts: 100000, runsDir: '/tmp/runs', chromium: '/opt/chromium',
    });
    expect(readFlags({ ROWDECK_SCAN: 'js', ROWDECK_PART_STATS: 'lanes' })).toMatchObject({ scan: 'js', partStats: 'lanes' });
    // Anything else leaves the default (as the scattered reads did).
    expect(readFlags({ ROWDECK_GATHER: 'wasm', ROWDECK_PHASES: 'yes', ROWDECK_PART_STATS: 'x', ROWDECK_OPEN_PARTS: '0' })).toMatchObject({ gather: 'auto', phases: false, partStats: 'auto', openParts: undefined });
    expect(readFlags({ ROWDECK_OPEN_PARTS: '2.5' }).openParts).toBeUndefined();
    expect(readFlags({ ROWDECK_LAYOUT: 'disk', ROWDECK_MEMORY_STORE: 'tmpfs' })).toMatchObject({ layout: undefined, memoryStore: 'auto' });
  });

  it('setFlag sets this thread and the environment, and puts both back', () => {
    const before = process.env.ROWDECK_BLOCK_BYTES;
    const restore = setFlag('ROWDECK_BLOCK_BYTES', '777');
    expect(flags.blockBytes).toBe(777);
    expect(process.env.ROWDECK_BLOCK_BYTES).toBe('777');
    restore();
    expect(process.env.ROWDECK_BLOCK_BYTES).toBe(before);
    const missing = ['ROWDECK', 'NO', 'SUCH'].join('_');
    expect(() => setFlag(missing as never, '1')).toThrow(`no switch ${missing}`);
  });
});
