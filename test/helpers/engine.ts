/** Helpers for engine tests: invented sensor data, temp folders, and an independent CSV parse. */
import { mkdtempSync, readdirSync, readFileSync, rmSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { gunzipSync } from 'node:zlib';
import { parse } from 'csv-parse/sync';
import { createRandom } from '../../scripts/mulberry32.mjs';

export { createRandom };

export interface SensorDataOptions {
  rows: number;
  seed?: number;
  /** Class shares; rows are written sorted by class, as field logs often are. */
  classes?: [string, number][];
  /** Use CRLF line ends. */
  crlf?: boolean;
  /** Leave the last record without a line end. */
  noFinalNewline?: boolean;
  /** Number of distinct sensors (for --group). */
  sensors?: number;
}

/**
 * An invented fleet of field sensors: id, sensor, site, reading, note, fault. Notes are quoted
 * now and then and may hold commas, doubled quotes, line breaks and non-ASCII text.
 */
export function makeSensorCsv(o: SensorDataOptions): string {
  const rnd = createRandom(o.seed ?? 1);
  const classes = o.classes ?? [['ok', 0.6], ['drift', 0.2], ['spike', 0.1], ['stuck', 0.07], ['dead', 0.03]];
  const eol = o.crlf ? '\r\n' : '\n';
  const sites = ['north-ridge', 'river-bend', 'salt-flat', 'pine-hollow'];
  const notes = ['recalibrated', 'lens "fogged", wiped', 'battery low,\nswapped', 'Überprüfung ok', 'gust 40 km/h', 'café stop\r\nback online'];
  const rows: string[] = [];
  let id = 0;
  for (const [cls, share] of classes) {
    const n = Math.round(o.rows * share);
    for (let k = 0; k < n; k++) {
      const sensor = `S${String(Math.floor(rnd() * (o.sensors ?? 50))).padStart(3, '0')}`;
      const site = sites[Math.floor(rnd() * sites.length)]!;
      const reading = (rnd() * 100 - 20).toFixed(2);
      let note = '';
      const r = rnd();
      if (r < 0.25) note = `"${notes[Math.floor(rnd() * notes.length)]!.replaceAll('"', '""')}"`;
      else if (r < 0.5) note = 'routine';
      rows.push(`${id++},${sensor},${site},${reading},${note},${cls}`);
    }
  }
  return 'id,sensor,site,reading,note,fault' + eol + rows.join(eol) + (o.noFinalNewline ? '' : eol);
}

export function makeTempDir(prefix = 'rowdeck-test-'): string {
  return mkdtempSync(join(tmpdir(), prefix));
}

export function removeDir(dir: string): void {
  rmSync(dir, { recursive: true, force: true });
}

/** Parses CSV with csv-parse (the reference parser), returning header and rows of strings. */
export function parseCsv(text: string | Buffer): { header: string[]; rows: string[][] } {
  const all = parse(text, { relax_column_count: false, bom: true }) as string[][];
  return { header: all[0] ?? [], rows: all.slice(1) };
}

export function readPart(path: string): Buffer {
  const b = readFileSync(path);
  return path.endsWith('.gz') ? gunzipSync(b) : b;
}

/** Every file under `dir`, as relative paths, sorted. */
export function listFiles(dir: string): string[] {
  const out: string[] = [];
  const walk = (d: string, rel: string): void => {
    for (const e of readdirSync(d).sort()) {
      const p = join(d, e);
      if (statSync(p).isDirectory()) walk(p, rel + e + '/');
      else out.push(rel + e);
    }
  };
  walk(dir, '');
  return out;
}

/** Sorted multiset of rows, each row joined with an unambiguous separator. */
export function rowMultiset(rows: string[][]): string[] {
  return rows.map((r) => JSON.stringify(r)).sort();
}
