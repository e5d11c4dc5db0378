#!/usr/bin/env node
// The peer a power user would reach for: a general-purpose SQL engine doing the same stratified
// deal (random order within each class, then round robin over 8 partitions), written to one CSV
// file per partition.
//   node bench/duckdb-deal.mjs INPUT OUTDIR [--memory-limit 1GB] [--class fault] [--partitions 8]
import { rmSync } from 'node:fs';
import { DuckDBInstance } from '@duckdb/node-api';

const [input, out, ...rest] = process.argv.slice(2);
const opt = (name, dflt) => {
  const i = rest.indexOf(`--${name}`);
  return i >= 0 ? rest[i + 1] : dflt;
};
const memoryLimit = opt('memory-limit', null);
const column = opt('class', 'fault');
const partitions = Number(opt('partitions', 8));
rmSync(out, { recursive: true, force: true });
const db = await DuckDBInstance.create(':memory:');
const con = await db.connect();
await con.run(`SET threads = ${Number(opt('threads', 2))}`);
if (memoryLimit) await con.run(`SET memory_limit = '${memoryLimit}'`);
await con.run('SELECT setseed(0.5)');
const q = (s) => `'${s.replaceAll("'", "''")}'`;
await con.run(`
  COPY (
    SELECT * EXCLUDE (rn), rn % ${partitions} AS part FROM (
      SELECT *, row_number() OVER (PARTITION BY "${column}" ORDER BY random()) - 1 AS rn
      FROM read_csv(${q(input)}, header = true, quote = '"', escape = '"', all_varchar = true)
    )
  ) TO ${q(out)} (FORMAT CSV, HEADER, PARTITION_BY (part))`);
