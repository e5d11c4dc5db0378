#!/usr/bin/env node
// Writes DEVELOPERS.md's table of ROWDECK_* switches from src/flags.ts (FLAG_SPECS), between its
// two marker lines. Run after changing a switch, after a build: node scripts/flags-table.mjs
// test/flags.test.ts fails when the table and FLAG_SPECS differ.
import { readFileSync, writeFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';

export const BEGIN = '<!-- switches: made by scripts/flags-table.mjs from src/flags.ts; do not edit by hand -->';
export const END = '<!-- end of switches -->';

/** The table (Markdown) of `specs`. */
export function flagsTable(specs) {
  const cell = (s) => s.replace(/\|/g, '\\|');
  const rows = specs.map((s) => `| \`${s.name}\` | ${cell(s.values)} | ${cell(s.meaning)} | ${s.readBy.map((f) => `\`${f}\``).join(', ')} |`);
  return ['| switch | values | what it does | read by |', '|---|---|---|---|', ...rows].join('\n');
}

/** `doc` with the text between the markers replaced by `table`. */
export function withTable(doc, table) {
  const a = doc.indexOf(BEGIN);
  const b = doc.indexOf(END);
  if (a < 0 || b < a) throw new Error(`DEVELOPERS.md has no ${BEGIN} ... ${END} block`);
  return `${doc.slice(0, a + BEGIN.length)}\n${table}\n${doc.slice(b)}`;
}

if (process.argv[1] === fileURLToPath(import.meta.url)) {
  const { FLAG_SPECS } = await import('../dist/flags.js');
  const path = new URL('../DEVELOPERS.md', import.meta.url);
  writeFileSync(path, withTable(readFileSync(path, 'utf8'), flagsTable(FLAG_SPECS)));
  console.log(`DEVELOPERS.md: ${FLAG_SPECS.length} switches`);
}
