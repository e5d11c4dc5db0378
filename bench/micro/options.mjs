// Options shared by the micro-benchmarks that count instructions (stage1.mjs, read.mjs).
import { readFileSync } from 'node:fs';

/** The value after `--name` on the command line, or `dflt`. */
export function arg(name, dflt) {
  const i = process.argv.indexOf(`--${name}`);
  return i > 0 ? process.argv[i + 1] : dflt;
}

/** The input (`--file`, default the 100 MB readings) cut to `--mb` megabytes, and `--rounds`. */
export function loadInput() {
  const file = arg('file', 'bench/data/readings-100m.csv');
  return { file, data: readFileSync(file).subarray(0, Number(arg('mb', 40)) * 1e6), rounds: Number(arg('rounds', 1)) };
}
