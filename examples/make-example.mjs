#!/usr/bin/env node
// Writes examples/sensor-readings.csv: a small invented log from a fictional fleet of field
// sensors, with a fault class. Deterministic: the same script always writes the same bytes.
//
//   node examples/make-example.mjs [--rows 3917] [--out examples/sensor-readings.csv]
//
// The rows are sorted by fault class (as a log exported per fault report would be), so taking a
// prefix or cutting the file in order gives badly skewed parts: the point of the example.
// Each sensor belongs to one site and logs many readings, so sensor_id suits --group.
// About a fifth of the notes are quoted: commas, doubled quotes, LF and CRLF line breaks inside.
import { mkdirSync, writeFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { createRandom } from '../scripts/mulberry32.mjs';

const here = dirname(fileURLToPath(import.meta.url));

function readArgs(argv) {
  const o = { rows: 3917, out: join(here, 'sensor-readings.csv') };
  for (let i = 0; i < argv.length; i++) {
    const a = argv[i];
    const v = argv[i + 1];
    if (a === '--rows') { o.rows = Number(v); i++; }
    else if (a === '--out') { o.out = v; i++; }
    else throw new Error(`unknown argument ${a} (expected --rows N or --out FILE)`);
  }
  if (!Number.isInteger(o.rows) || o.rows < 100) throw new Error('--rows must be a whole number of at least 100');
  return o;
}

// Shares add up to 1; the rarest class still has enough rows for 8 partitions x 5 folds.
const FAULTS = [['none', 0.6], ['drift', 0.2], ['spike', 0.1], ['dropout', 0.07], ['overheat', 0.03]];
const SITES = ['north-ridge', 'lake-shore', 'quarry-7', 'old-mill', 'pine-valley', 'river-bend'];
const SENSORS = 120;
const CREW = ['Ana', 'Bjørn', 'Chidi', 'Dara', 'Émile'];
const PLAIN_NOTES = ['routine', 'checked', 'recalibrated', 'battery-swapped', 'bird-on-mast', 'ice-on-housing'];

function makeNote(rnd) {
  const r = rnd();
  if (r < 0.55) return '';
  if (r < 0.8) return PLAIN_NOTES[Math.floor(rnd() * PLAIN_NOTES.length)];
  const who = CREW[Math.floor(rnd() * CREW.length)];
  const k = rnd();
  let text;
  if (k < 0.35) text = `cable loose, re-seated by ${who}`;
  else if (k < 0.6) text = `${who} wrote "housing cracked", sealed`;
  else if (k < 0.85) text = `gust 40 km/h\nmast re-aligned by ${who}`;
  else text = `reset twice,\r\n"still odd", says ${who}`;
  return `"${text.replaceAll('"', '""')}"`;
}

function makeRow(rnd, id, fault) {
  const n = Math.floor(rnd() * SENSORS);
  const sensor = `FS-${String(n + 1).padStart(3, '0')}`;
  const site = SITES[n % SITES.length];
  const at = new Date(Date.UTC(2025, 3, 1) + Math.floor(rnd() * 90 * 86400) * 1000).toISOString().replace('.000Z', 'Z');
  const temp = (fault === 'overheat' ? 61 + rnd() * 25 : -5 + rnd() * 35).toFixed(2);
  const hum = (rnd() * 100).toFixed(1);
  const batt = (fault === 'dropout' ? 2.9 + rnd() * 0.4 : 3.3 + rnd() * 0.9).toFixed(3);
  // A dropout loses the vibration channel: an empty field, i.e. a missing value.
  const vib = fault === 'dropout' ? '' : (rnd() * (fault === 'spike' ? 9 : 1.5)).toFixed(4);
  return `${id},${sensor},${site},${at},${temp},${hum},${batt},${vib},${makeNote(rnd)},${fault}\n`;
}

function main() {
  const o = readArgs(process.argv.slice(2));
  const rnd = createRandom(20250401);
  let text = 'reading_id,sensor_id,site,taken_at,temp_c,humidity_pct,battery_v,vibration_g,note,fault\n';
  let id = 1;
  for (const [fault, share] of FAULTS) {
    const n = Math.round(o.rows * share);
    for (let i = 0; i < n; i++) text += makeRow(rnd, id++, fault);
  }
  mkdirSync(dirname(o.out), { recursive: true });
  writeFileSync(o.out, text);
  process.stderr.write(`wrote ${o.out}: ${id - 1} rows, ${Buffer.byteLength(text)} bytes\n`);
}

main();
