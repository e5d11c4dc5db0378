#!/usr/bin/env node
// Writes a deterministic invented data set: readings from a fictional fleet of field sensors,
// with a fault class. Same --seed and --bytes, same bytes out.
//
//   node bench/generate.mjs --bytes 1e9 --seed 1 --out bench/data/readings.csv [--format csv|jsonl] [--quote-all]
//
// Columns: reading_id, sensor_id, site, taken_at (ISO 8601), temp_c, humidity_pct, battery_v,
// vibration_g, note, fault. The note is quoted about 30 % of the time and then may hold commas,
// doubled quotes and line breaks. fault has 5 classes (60/20/10/7/3 %), and the rows are sorted
// by fault class, so a reader or shuffler that only looks at a prefix sees one class.
// --quote-all puts every CSV field in quotes, as many exporters write CSV.
import { openSync, writeSync, closeSync, mkdirSync } from 'node:fs';
import { dirname } from 'node:path';
import { createRandom } from '../scripts/mulberry32.mjs';

function readArgs(argv) {
  const o = { bytes: 1e6, seed: 1, out: null, format: 'csv', quoteAll: false };
  for (let i = 0; i < argv.length; i++) {
    const a = argv[i];
    const v = argv[i + 1];
    if (a === '--bytes') { o.bytes = Number(v); i++; }
    else if (a === '--seed') { o.seed = Number(v); i++; }
    else if (a === '--out') { o.out = v; i++; }
    else if (a === '--format') { o.format = v; i++; }
    else if (a === '--quote-all') o.quoteAll = true;
    else throw new Error(`unknown argument ${a}`);
  }
  if (!o.out) throw new Error('--out is required');
  if (!(o.bytes > 0)) throw new Error('--bytes must be a positive number');
  if (o.format !== 'csv' && o.format !== 'jsonl') throw new Error('--format must be csv or jsonl');
  return o;
}

const FAULTS = [['none', 0.6], ['drift', 0.2], ['spike', 0.1], ['dropout', 0.07], ['overheat', 0.03]];
const SITES = ['north-ridge', 'lake-shore', 'quarry-7', 'old-mill', 'pine-valley', 'river-bend', 'dry-flats', 'harbour'];
const WORDS = ['sensor', 'reset', 'cable', 'checked', 'ok', 'gust', 'rain', 'battery', 'swapped', 'bracket', 'loose', 'calibrated', 'bird', 'nest', 'ice', 'noted', 'field', 'crew', 'visit', 'Süd', 'naïve'];

function makeNote(rnd) {
  const r = rnd();
  if (r < 0.5) return { text: '', quoted: false };
  const n = 1 + Math.floor(rnd() * 8);
  const w = [];
  for (let i = 0; i < n; i++) w.push(WORDS[Math.floor(rnd() * WORDS.length)]);
  if (r < 0.7) return { text: w.join('-'), quoted: false }; // plain, no specials
  // Quoted (about 30 % of rows): commas, doubled quotes, sometimes a line break.
  let t = w.join(' ');
  const k = rnd();
  if (k < 0.5) t = t.replace(' ', ', ');
  else if (k < 0.75) t = `crew said "${t}"`;
  else if (k < 0.9) t = `${t}\nfollow-up: ${w[0]}`;
  else t = `${t},\r\n"${w[0]}", again`;
  return { text: t, quoted: true };
}

function makeRow(rnd, id, fault, format, quoteAll = false) {
  const sensor = `S${String(1 + Math.floor(rnd() * 5000)).padStart(5, '0')}`;
  const site = SITES[Math.floor(rnd() * SITES.length)];
  const ts = new Date(Date.UTC(2023, 0, 1) + Math.floor(rnd() * 365 * 86400) * 1000).toISOString().replace('.000Z', 'Z');
  const temp = (fault === 'overheat' ? 60 + rnd() * 30 : -10 + rnd() * 45).toFixed(2);
  const hum = (rnd() * 100).toFixed(1);
  const batt = (3 + rnd() * 1.2).toFixed(3);
  const vib = fault === 'dropout' ? '' : (rnd() * (fault === 'spike' ? 9 : 1.5)).toFixed(4);
  const note = makeNote(rnd);
  if (format === 'jsonl') {
    return JSON.stringify({ reading_id: id, sensor_id: sensor, site, taken_at: ts, temp_c: Number(temp), humidity_pct: Number(hum), battery_v: Number(batt), vibration_g: vib === '' ? null : Number(vib), note: note.text, fault }) + '\n';
  }
  const noteField = note.quoted || quoteAll ? `"${note.text.replaceAll('"', '""')}"` : note.text;
  if (quoteAll) return `"${id}","${sensor}","${site}","${ts}","${temp}","${hum}","${batt}","${vib}",${noteField},"${fault}"\n`;
  return `${id},${sensor},${site},${ts},${temp},${hum},${batt},${vib},${noteField},${fault}\n`;
}

const HEADER = 'reading_id,sensor_id,site,taken_at,temp_c,humidity_pct,battery_v,vibration_g,note,fault\n';

function main() {
  const o = readArgs(process.argv.slice(2));
  // Estimate the mean row size with a separate stream, then fix the row count per class.
  const probe = createRandom(o.seed ^ 0x9e3779b9);
  let sample = 0;
  for (let i = 0; i < 4000; i++) sample += Buffer.byteLength(makeRow(probe, 1_000_000 + i, FAULTS[i % 5][0], o.format, o.quoteAll));
  const rows = Math.max(1, Math.floor((o.bytes - HEADER.length) / (sample / 4000)));
  const rnd = createRandom(o.seed);
  mkdirSync(dirname(o.out), { recursive: true });
  const fd = openSync(o.out, 'w');
  let buf = o.format === 'csv' ? HEADER : '';
  let id = 1;
  let written = 0;
  for (const [fault, share] of FAULTS) {
    const n = Math.round(rows * share);
    for (let i = 0; i < n; i++) {
      buf += makeRow(rnd, id++, fault, o.format, o.quoteAll);
      if (buf.length > 1 << 20) { written += writeSync(fd, buf); buf = ''; }
    }
  }
  written += writeSync(fd, buf);
  closeSync(fd);
  process.stderr.write(`wrote ${o.out}: ${id - 1} rows, ${written} bytes (${o.format})\n`);
}

main();
