/**
 * Every ROWDECK_* environment switch, in one place: its values, what it does, and the files that
 * act on it. They serve tests, benchmarks and experiments; none changes the parts or the manifest's
 * figures (each WebAssembly module has a JavaScript twin that writes the same bytes, and block and
 * bucket sizes do not reach the output; ROWDECK_PHASES adds timings to the manifest's run section).
 *
 * Each thread reads its environment once, when this module loads, into `flags`; the code reads
 * `flags`, never `process.env`. A worker thread gets a copy of the environment as it was when the
 * worker started, so a variable set before a run reaches that run's workers. Tests change a switch
 * on the running thread with `setFlag`, which also sets the variable for workers started after.
 * Some switches are taken up once per thread when their module loads (the kernels' on/off); their
 * modules have a setter for tests (useStructuralScan, useJsonlCheck, useGatherKernel,
 * useSortKernel, useStatsKernel).
 *
 * DEVELOPERS.md's table of switches is made from FLAG_SPECS (scripts/flags-table.mjs), and
 * test/flags.test.ts fails when the two differ, when a ROWDECK_* name appears anywhere without a
 * spec here, or when a spec's `readBy` is not the list of files that read it.
 */

/** The six WebAssembly modules (scripts/wasm.mjs builds them). */
export type WasmModuleName = 'structural' | 'jsonl' | 'spill' | 'gather' | 'sort' | 'stats';

/** A kernel switch: `auto` uses the module where this runtime has WebAssembly SIMD, `js` its JavaScript twin. */
export type KernelMode = 'auto' | 'js';

export interface Flags {
  scan: 'auto' | 'js' | 'simd';
  jsonl: KernelMode;
  spill: KernelMode;
  gather: KernelMode;
  sort: KernelMode;
  stats: KernelMode;
  phases: boolean;
  bucketBits: number | undefined;
  layout: 'memory' | 'spill' | 'multi-pass' | undefined;
  storeBytes: number | undefined;
  memoryStore: 'auto' | 'shared';
  partStats: 'auto' | 'lanes' | 'files';
  blockBytes: number | undefined;
  lookaheadBytes: number | undefined;
  openParts: number | undefined;
  runsDir: string | undefined;
  chromium: string | undefined;
}

export interface FlagSpec {
  name: `ROWDECK_${string}`;
  /** Its field in `Flags`. */
  key: keyof Flags;
  /** The values it takes, as the table shows them. */
  values: string;
  meaning: string;
  /** The files that read `flags.<key>` (relative to the repository). */
  readBy: readonly string[];
  /** The WebAssembly module whose JavaScript twin `js` selects. */
  module?: WasmModuleName;
  /** How the environment's text becomes the value. */
  parse(text: string | undefined): Flags[keyof Flags];
}

const kernel = (text: string | undefined): KernelMode => (text === 'js' ? 'js' : 'auto');
const number = (text: string | undefined): number | undefined => (text ? Number(text) : undefined);

export const FLAG_SPECS: readonly FlagSpec[] = [
  {
    name: 'ROWDECK_SCAN', key: 'scan', values: '`js`, `simd`', module: 'structural',
    meaning: 'CSV/TSV data on one scan: `js` the JavaScript byte scan only, `simd` the structural module (structural.wat) for every size (unset: the module from 4 KiB of data)',
    readBy: ['src/io/csv-records.ts'],
    parse: (t) => (t === 'js' ? 'js' : t === 'simd' ? 'simd' : 'auto'),
  },
  {
    name: 'ROWDECK_JSONL', key: 'jsonl', values: '`js`', module: 'jsonl',
    meaning: 'JSON Lines: JSON.parse reads every line (not jsonl.wat first)',
    readBy: ['src/io/jsonl.ts'], parse: kernel,
  },
  {
    name: 'ROWDECK_SPILL', key: 'spill', values: '`js`', module: 'spill',
    meaning: "stage 1's keying and appends to the bucket buffers in JavaScript (not spill.wat)",
    readBy: ['src/engine/spill.ts'], parse: kernel,
  },
  {
    name: 'ROWDECK_GATHER', key: 'gather', values: '`js`', module: 'gather',
    meaning: "stage 2's key-order copy, fold field, line ends and fingerprints in JavaScript (not gather.wat)",
    readBy: ['src/engine/gather-kernel.ts'], parse: kernel,
  },
  {
    name: 'ROWDECK_SORT', key: 'sort', values: '`js`', module: 'sort',
    meaning: "stage 2's radix passes over a bucket's keys in JavaScript (not sort.wat)",
    readBy: ['src/core/sort.ts'], parse: kernel,
  },
  {
    name: 'ROWDECK_STATS', key: 'stats', values: '`js`', module: 'stats',
    meaning: 'column statistics (`profile`, `--stats`) in JavaScript (not stats.wat)',
    readBy: ['src/core/stats-kernel.ts'], parse: kernel,
  },
  {
    name: 'ROWDECK_PHASES', key: 'phases', values: '`1`',
    meaning: "times the phases of stage 2 (read, index, sort, deal, copy): the manifest's `run.timingsMs` gets the split",
    readBy: ['src/engine/gather.ts'], parse: (t) => t === '1',
  },
  {
    name: 'ROWDECK_BUCKET_BITS', key: 'bucketBits', values: 'an integer (the engine chooses 0..14)',
    meaning: 'forces the number of spill buckets to 2^bits instead of choosing it from the input size and `--memory`',
    readBy: ['src/engine/sizing.ts'], parse: number,
  },
  {
    name: 'ROWDECK_LAYOUT', key: 'layout', values: '`memory`, `spill`, `multi-pass`',
    meaning: "forces the layout instead of deciding it from the input's size over `--memory` (`memory` even past the budget; `multi-pass` with buckets 8 times the size stage 2 then takes whole, so that every bucket is split)",
    readBy: ['src/engine/sizing.ts'],
    parse: (t) => (t === 'memory' || t === 'spill' || t === 'multi-pass' ? t : undefined),
  },
  {
    name: 'ROWDECK_STORE_BYTES', key: 'storeBytes', values: 'bytes',
    meaning: 'how much of the spill a one-process run keeps in memory before the rest goes to files (the memory and spill layouts; `ROWDECK_LAYOUT=spill` alone keeps none), instead of what the budget leaves',
    readBy: ['src/engine/sizing.ts'], parse: number,
  },
  {
    name: 'ROWDECK_MEMORY_STORE', key: 'memoryStore', values: '`shared`',
    meaning: 'the memory layout keeps the spill in SharedArrayBuffers, not in unnamed files in /dev/shm (a memory file system)',
    readBy: ['src/engine/ram-store.ts'],
    parse: (t) => (t === 'shared' ? 'shared' : 'auto'),
  },
  {
    name: 'ROWDECK_PART_STATS', key: 'partStats', values: '`lanes`, `files`',
    meaning: "with `--stats`: each part's statistics kept by the lanes as they deal (`lanes`) or read back from the part files (`files`), instead of choosing by memory",
    readBy: ['src/engine/part-stats.ts'],
    parse: (t) => (t === 'lanes' ? 'lanes' : t === 'files' ? 'files' : 'auto'),
  },
  {
    name: 'ROWDECK_BLOCK_BYTES', key: 'blockBytes', values: 'bytes (16 or more)',
    meaning: 'size of the blocks of a plain file that workers parse (small values make many blocks and many wrong guesses of where a record starts)',
    readBy: ['src/io/blocks.ts'], parse: number,
  },
  {
    name: 'ROWDECK_LOOKAHEAD_BYTES', key: 'lookaheadBytes', values: 'bytes (8 or more)',
    meaning: 'how far past its block a worker may read to finish its last record (a longer record goes to the main thread)',
    readBy: ['src/io/blocks.ts'], parse: number,
  },
  {
    name: 'ROWDECK_OPEN_PARTS', key: 'openParts', values: 'a count (1 or more)',
    meaning: 'part files kept open at once, instead of a quarter of the open-file limit (8 to 512)',
    readBy: ['src/io/open-files.ts'],
    parse: (t) => {
      const n = Number(t);
      return Number.isInteger(n) && n > 0 ? n : undefined;
    },
  },
  {
    name: 'ROWDECK_RUNS_DIR', key: 'runsDir', values: 'a folder',
    meaning: 'where runs record their work folders while they work, so a later run can remove those of a killed one (default: `<tmp>/rowdeck-runs-<uid>`)',
    readBy: ['src/io/work-folders.ts'], parse: (t) => t,
  },
  {
    name: 'ROWDECK_CHROMIUM', key: 'chromium', values: 'a path',
    meaning: "the chromium that the browser test and the report's screenshot run (default: Debian's chromium)",
    readBy: ['test/helpers/chromium.ts', 'scripts/report-example.mjs'], parse: (t) => t || undefined,
  },
];

/** The switches as `env` sets them. */
export function readFlags(env: Record<string, string | undefined>): Flags {
  const out: Partial<Record<keyof Flags, unknown>> = {};
  for (const spec of FLAG_SPECS) out[spec.key] = spec.parse(env[spec.name]);
  return out as Flags;
}

/** This thread's switches, read from its environment when this module loaded. */
export const flags: Flags = readFlags(process.env);

/**
 * Tests and benchmarks: sets switch `name` (undefined: unset) on this thread, and in
 * process.env so that worker threads started after see it too. Returns a function that puts back
 * what was there before.
 */
export function setFlag(name: FlagSpec['name'], value: string | undefined): () => void {
  const spec = FLAG_SPECS.find((s) => s.name === name);
  if (!spec) throw new Error(`internal: no switch ${name} (see src/flags.ts)`);
  const before = process.env[name];
  const apply = (text: string | undefined): void => {
    if (text === undefined) delete process.env[name];
    else process.env[name] = text;
    Object.assign(flags, { [spec.key]: spec.parse(text) });
  };
  apply(value);
  return () => apply(before);
}

/** The switch that selects `module`'s JavaScript twin (ROWDECK_SCAN for the structural scan). */
export function twinSwitch(module: WasmModuleName): FlagSpec['name'] {
  return FLAG_SPECS.find((s) => s.module === module)!.name;
}
