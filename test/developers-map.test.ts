/**
 * DEVELOPERS.md's map of the source tree against the tree itself: every file the map names
 * exists, and every source file is named in it, so the map cannot fall behind a split or a new
 * module unnoticed.
 *
 * How the map is read: a line at the left margin that starts with a folder (`src/engine/`) opens
 * that folder; one that starts with a file (`src/index.ts`) names that file; an indented line
 * names the files it starts with (`  charts.ts, svg.ts   …`, up to the first space) inside the open folder. The
 * WebAssembly modules' generated `*-wasm.ts` files may be named anywhere in their folder's text.
 */
import { readdirSync, readFileSync, statSync, existsSync } from 'node:fs';
import { join, relative, sep } from 'node:path';
import { describe, expect, it } from 'vitest';

const root = join(import.meta.dirname, '..');

export interface MapEntry {
  path: string;
  line: number;
}

/** The files the map names as entries, and the text of each folder's block. */
export function readMap(doc: string): { entries: MapEntry[]; blocks: Map<string, string> } {
  const start = doc.indexOf('## Map');
  if (start < 0) throw new Error('DEVELOPERS.md has no "## Map" section');
  const open = doc.indexOf('```', start);
  const close = doc.indexOf('```', open + 3);
  const before = doc.slice(0, open).split('\n').length;
  const lines = doc.slice(doc.indexOf('\n', open) + 1, close).split('\n');
  const entries: MapEntry[] = [];
  const blocks = new Map<string, string>();
  let folder = '';
  lines.forEach((text, i) => {
    const line = before + 1 + i;
    if (text.trim() === '') return;
    if (!text.startsWith(' ')) {
      const first = text.split(/\s+/)[0]!;
      if (first.endsWith('/')) folder = first;
      else {
        folder = '';
        entries.push({ path: first, line });
      }
      blocks.set(folder, (blocks.get(folder) ?? '') + text + '\n');
      return;
    }
    blocks.set(folder, (blocks.get(folder) ?? '') + text + '\n');
    // The leading names: "name.ts", or "a.ts, b.ts", up to the next space (then the description).
    const lead = /^ {2}([\w.-]+(?:, [\w.-]+)*)(?: +|$)/.exec(text);
    if (!lead) return;
    for (const name of lead[1]!.split(', ')) entries.push({ path: folder + name, line });
  });
  return { entries, blocks };
}

function sourceFiles(dir: string): string[] {
  return readdirSync(dir).flatMap((name) => {
    const p = join(dir, name);
    return statSync(p).isDirectory() ? sourceFiles(p) : p.endsWith('.ts') ? [relative(root, p).split(sep).join('/')] : [];
  });
}

describe("DEVELOPERS.md's map", () => {
  const { entries, blocks } = readMap(readFileSync(join(root, 'DEVELOPERS.md'), 'utf8'));

  it('reads entries from the map (a test of the reading)', () => {
    const sample = '# x\n## Map\n\n```\nsrc/a.ts      one\nsrc/b/        folder\n  c.ts        c\n  d.ts, e.ts  two\n              more text.ts\n```\n';
    expect(readMap(sample).entries.map((e) => e.path)).toEqual(['src/a.ts', 'src/b/c.ts', 'src/b/d.ts', 'src/b/e.ts']);
    expect(entries.length).toBeGreaterThan(80);
  });

  it('names only files and folders that exist', () => {
    const missing = entries.filter((e) => !existsSync(join(root, e.path))).map((e) => `DEVELOPERS.md:${e.line}: ${e.path}`);
    expect(missing).toEqual([]);
  });

  it('names every source file under src/', () => {
    const named = new Set(entries.map((e) => e.path));
    const unnamed = sourceFiles(join(root, 'src')).filter((f) => {
      if (named.has(f)) return false;
      // A generated module's TypeScript is named in its folder's text (beside its generator).
      if (f.endsWith('-wasm.ts')) {
        const slash = f.lastIndexOf('/');
        return !(blocks.get(f.slice(0, slash + 1)) ?? '').includes(f.slice(slash + 1));
      }
      return true;
    });
    expect(unnamed, 'add them to the map in DEVELOPERS.md').toEqual([]);
  });
});
