#!/usr/bin/env node
// Makes docs/report-example.png: the report of the example data (four parts, five folds,
// stratified by fault, verified), the top of the page as headless chromium shows it.
// Run after `npm run build`, with Debian's chromium installed: node scripts/report-example.mjs
import { spawnSync } from 'node:child_process';
import { mkdtempSync, rmSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { flags } from '../dist/flags.js';

const root = fileURLToPath(new URL('..', import.meta.url));
const cli = join(root, 'dist', 'cli', 'main.cjs');
const work = mkdtempSync(join(tmpdir(), 'rowdeck-example-'));
const out = join(work, 'by-fault');
const run = (args) => {
  const r = spawnSync(process.execPath, [cli, ...args], { stdio: ['ignore', 'inherit', 'inherit'] });
  if (r.status !== 0) process.exit(r.status ?? 1);
};
try {
  run(['shuffle', join(root, 'examples', 'sensor-readings.csv'), '--out', out, '--partitions', '4', '--folds', '5', '--stratify', 'fault', '--seed', 'field-season-2025', '--quiet']);
  run(['report', out, '--verify', '--quiet']);
  const png = join(root, 'docs', 'report-example.png');
  const r = spawnSync(
    flags.chromium ?? 'chromium',
    ['--headless', '--no-sandbox', '--disable-gpu', '--disable-background-networking', '--disable-component-update', '--disable-sync', '--no-first-run', '--hide-scrollbars', `--user-data-dir=${join(work, 'profile')}`, '--window-size=1040,1400', `--screenshot=${png}`, pathToFileURL(join(out, 'report.html')).href],
    { stdio: 'ignore' },
  );
  if (r.status !== 0) throw new Error(`chromium exited with ${r.status}`);
  console.log(`${png}: ${statSync(png).size} bytes`);
} finally {
  rmSync(work, { recursive: true, force: true });
}
