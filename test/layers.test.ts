/**
 * The shape of the source tree, as DEVELOPERS.md describes it: src/core is pure code the rest
 * builds on, so it imports nothing from io, engine, workers or cli (read from each file's import
 * and export lines); and no source file grows past 600 lines (the generated WebAssembly modules,
 * *-wasm.ts, aside), so each file stays one job a reader can hold.
 */
import { readdirSync, readFileSync, statSync } from 'node:fs';
import { dirname, join, relative, resolve, sep } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';

const src = join(dirname(fileURLToPath(import.meta.url)), '..', 'src');

/** Folders core must not import from. */
const OUTER = ['io', 'engine', 'workers', 'cli'];

const MAX_LINES = 600;

/**
 * Files over MAX_LINES while they wait to be split along their seams (issue 21), with their
 * length when listed. Remove a file from here once it is split: the test fails for a listed file
 * that no longer needs the exception, so the list only shrinks.
 */
const TOO_LONG_FOR_NOW = new Map<string, number>([
]);

function sourceFiles(dir: string): string[] {
  return readdirSync(dir).flatMap((name) => {
    const p = join(dir, name);
    return statSync(p).isDirectory() ? sourceFiles(p) : p.endsWith('.ts') ? [p] : [];
  });
}

/** Module specifiers a file imports or re-exports: static, side-effect only and dynamic imports. */
function importedSpecifiers(text: string): string[] {
  const code = text.replace(/\/\*[\s\S]*?\*\//g, '').replace(/^\s*\/\/.*$/gm, '');
  const out: string[] = [];
  for (const m of code.matchAll(/^\s*(?:import|export)\b[^'";]*?\bfrom\s*['"]([^'"]+)['"]/gm)) out.push(m[1]!);
  for (const m of code.matchAll(/^\s*import\s*['"]([^'"]+)['"]/gm)) out.push(m[1]!);
  for (const m of code.matchAll(/\bimport\s*\(\s*['"]([^'"]+)['"]\s*\)/g)) out.push(m[1]!);
  return out;
}

/** The top folder under src/ a relative specifier of `file` lands in ('' for a file directly in src/), or null for a package. */
function landsIn(file: string, specifier: string): string | null {
  if (!specifier.startsWith('.')) return null;
  const target = relative(src, resolve(dirname(file), specifier));
  const parts = target.split(sep);
  return parts.length > 1 ? parts[0]! : '';
}

const lineCount = (text: string): number => text.split('\n').length - (text.endsWith('\n') ? 1 : 0);

describe('reading import lines', () => {
  it('finds static, multi-line, re-exported, side-effect and dynamic imports, and skips comments', () => {
    const text = [
      "import { a } from './a.js';",
      'import {',
      '  b,',
      '  type C,',
      "} from '../io/b.js';",
      "import type { D } from \"../engine/d.js\";",
      "export { e } from './e.js';",
      "export type { F } from '../workers/f.js';",
      "import './side.js';",
      "const g = await import('../cli/g.js');",
      "// import { no } from '../io/comment.js';",
      "/* import { no } from '../io/block.js'; */",
      "const s = 'import { no } from \"../io/string.js\"';",
    ].join('\n');
    expect(importedSpecifiers(text)).toEqual(['./a.js', '../io/b.js', '../engine/d.js', './e.js', '../workers/f.js', './side.js', '../cli/g.js']);
  });

  it('tells which folder of src a specifier lands in', () => {
    const file = join(src, 'core', 'x.ts');
    expect(landsIn(file, '../io/batch.js')).toBe('io');
    expect(landsIn(file, './hash.js')).toBe('core');
    expect(landsIn(file, '../errors.js')).toBe('');
    expect(landsIn(file, 'node:fs')).toBeNull();
  });
});

describe('layers', () => {
  const core = sourceFiles(join(src, 'core'));

  it('src/core has files to check', () => {
    expect(core.length).toBeGreaterThan(10);
  });

  it.each(core.map((f) => [relative(src, f), f] as const))('%s imports nothing from io, engine, workers or cli', (_name, file) => {
    const outward = importedSpecifiers(readFileSync(file, 'utf8')).filter((s) => OUTER.includes(landsIn(file, s) ?? ''));
    expect(outward).toEqual([]);
  });
});

describe('file length', () => {
  const files = sourceFiles(src).filter((f) => !f.endsWith('-wasm.ts'));

  it.each(files.map((f) => [relative(src, f).split(sep).join('/'), f] as const))(`%s has at most ${MAX_LINES} lines (or is a listed exception)`, (name, file) => {
    const n = lineCount(readFileSync(file, 'utf8'));
    const allowed = TOO_LONG_FOR_NOW.has(name);
    if (allowed) expect(n, `${name} is no longer over ${MAX_LINES} lines: take it off TOO_LONG_FOR_NOW`).toBeGreaterThan(MAX_LINES);
    else expect(n, `${name} has ${n} lines: split it along its seams`).toBeLessThanOrEqual(MAX_LINES);
  });

  it('every listed exception is a file that exists', () => {
    const names = new Set(files.map((f) => relative(src, f).split(sep).join('/')));
    expect([...TOO_LONG_FOR_NOW.keys()].filter((n) => !names.has(n))).toEqual([]);
  });
});
