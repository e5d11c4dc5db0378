#!/usr/bin/env node
// Writes a deterministic invented wide data set: snapshots of a fictional acoustic test rig with
// 2,000 microphone channels, one row per snapshot. Same arguments, same bytes out.
//
//   node bench/generate-wide.mjs --rows 5000 --channels 2000 --seed 1 --out bench/data/rig-wide.csv
//
// Columns: shot (an id), rig_state (3 classes: idle 50 %, load 35 %, fault 15 %), then mic0001 …
// micNNNN, levels in dB with two decimals. Odd channels are coarse (a few hundred distinct
// values: their statistics stay exact below the distinct cap of 1,000), even channels fine (tens
// of thousands: past the cap, estimated). So one file has both kinds of wide columns.
import { openSync, writeSync, closeSync, mkdirSync } from 'node:fs';
import { dirname } from 'node:path';
import { createRandom } from '../scripts/mulberry32.mjs';

function readArgs(argv) {
  const o = { rows: 5000, channels: 2000, seed: 1, out: null };
  for (let i = 0; i < argv.length; i++) {
    const a = argv[i];
    const v = Number(argv[i + 1]);
    if (a === '--rows') o.rows = v;
    else if (a === '--channels') o.channels = v;
    else if (a === '--seed') o.seed = v;
    else if (a === '--out') o.out = argv[i + 1];
    else throw new Error(`unknown argument ${a}`);
    i++;
  }
  if (!o.out) throw new Error('--out is required');
  if (!(o.rows > 0 && o.channels > 0)) throw new Error('--rows and --channels must be positive');
  return o;
}

const STATES = [['idle', 0.5], ['load', 0.35], ['fault', 0.15]];

function main() {
  const o = readArgs(process.argv.slice(2));
  const rnd = createRandom(o.seed);
  mkdirSync(dirname(o.out), { recursive: true });
  const fd = openSync(o.out, 'w');
  const mics = Array.from({ length: o.channels }, (_, c) => `mic${String(c + 1).padStart(4, '0')}`);
  let buf = `shot,rig_state,${mics.join(',')}\n`;
  let written = 0;
  for (let r = 0; r < o.rows; r++) {
    const u = rnd();
    const state = u < STATES[0][1] ? STATES[0][0] : u < STATES[0][1] + STATES[1][1] ? STATES[1][0] : STATES[2][0];
    const base = state === 'idle' ? 30 : state === 'load' ? 55 : 70;
    const row = [String(r + 1), state];
    for (let c = 0; c < o.channels; c++) {
      // Coarse channels step by 0.25 dB over ~75 dB (~300 values); fine ones by 0.01 dB.
      const level = base + rnd() * 40 + (c % 7);
      row.push(c % 2 === 0 ? (Math.round(level * 4) / 4).toFixed(2) : level.toFixed(2));
    }
    buf += row.join(',') + '\n';
    if (buf.length > 1 << 20) {
      written += writeSync(fd, buf);
      buf = '';
    }
  }
  written += writeSync(fd, buf);
  closeSync(fd);
  process.stderr.write(`wrote ${o.out}: ${o.rows} rows, ${o.channels + 2} columns, ${written} bytes\n`);
}

main();
