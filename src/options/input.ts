/**
 * The options every reading command shares (inputs, format, delimiter, header, bad records,
 * data values, threads, memory, the spill folder): one definition each, so they are checked,
 * spelled and explained the same way by shuffle, profile and verify. A command takes them as
 * they are, or with its own help text (`withHelp`).
 */
import { availableParallelism } from 'node:os';
import type { BadRecordPolicy, InputFormat } from '../io/batch.js';
import { smallInputs } from '../io/input.js';
import {
  booleanValue,
  choiceValue,
  inputPathsValue,
  integerValue,
  sizeValue,
  textValue,
  type OptionDef,
} from './spec.js';

export const DEFAULT_MEMORY = 512 * 1024 * 1024;
export const MAX_THREADS = 256;
export const FORMATS: readonly InputFormat[] = ['csv', 'tsv', 'jsonl'];
export const BAD_RECORD_POLICIES: readonly BadRecordPolicy[] = ['fail', 'skip', 'quarantine'];

/** The same definition with another help text (and section). */
export function withHelp<V>(def: OptionDef<V>, help: readonly string[], section = def.section): OptionDef<V> {
  return { ...def, help, ...(section !== undefined ? { section } : {}) };
}

const DELIMITER_EXPECTED = 'one single-byte character other than a quote or a line end';

export const inputsOption: OptionDef<string[]> = {
  cli: { positional: 'INPUT', many: true },
  required: 'an input file (or - for standard input)',
  ...inputPathsValue(),
};

export const formatOption: OptionDef<InputFormat> = {
  cli: { flag: 'format', arg: 'csv|tsv|jsonl' },
  section: 'Input',
  help: [
    'default: from the file name (.csv .tsv .tab .jsonl .ndjson, with',
    '.gz); otherwise, and for standard input, from the first bytes (a',
    'JSON object: jsonl; tabs and no commas: tsv; else csv)',
  ],
  ...choiceValue(FORMATS),
};

export const delimiterOption: OptionDef<string> = {
  cli: { flag: 'delimiter', arg: 'C' },
  section: 'Input',
  help: ['one-byte field delimiter (default , or tab for TSV; \\t or tab: a tab)'],
  text: true,
  check: (v, c) => {
    if (typeof v !== 'string' || Buffer.byteLength(v) !== 1 || v === '"' || v === '\n' || v === '\r') return c.fail(DELIMITER_EXPECTED, v);
    return v;
  },
  fromText: (s) => (s === '\\t' || s.toLowerCase() === 'tab' ? '\t' : s),
};

export const headerOption: OptionDef<boolean> = {
  cli: { flag: 'no-header', negated: true },
  section: 'Input',
  help: ['the first line is data; columns are named column_1, column_2, ...'],
  ...booleanValue(),
};

export const onBadRecordOption: OptionDef<BadRecordPolicy> = {
  cli: { flag: 'on-bad-record', arg: 'MODE' },
  section: 'Input',
  help: [
    'fail (default): stop at the first malformed record;',
    'skip: count and leave it out; quarantine: also write it, with its',
    'line number and reason, to DIR/rejected.csv',
  ],
  ...choiceValue(BAD_RECORD_POLICIES),
};

export const excludeValuesOption: OptionDef<boolean> = {
  cli: { flag: 'exclude-values' },
  section: 'Output and resources',
  help: ['leave data values (class names, frequent values) out of the manifest'],
  ...booleanValue(),
};

/**
 * 0 means the calling thread everywhere: all the work is done there, no worker is started. N ≥ 1
 * starts N worker threads.
 */
export const threadsOption: OptionDef<number> = {
  cli: { flag: 'threads', arg: 'N' },
  section: 'Output and resources',
  help: [
    'worker threads (default: number of cores; inputs under 32 MiB, or 192 MiB',
    'on two cores without --stats, are shuffled on the calling thread, faster',
    'than starting threads); 0 keeps all the work on the calling thread. The',
    'output is the same either way',
  ],
  ...integerValue(0, MAX_THREADS),
};

export const memoryOption: OptionDef<number> = {
  cli: { flag: 'memory', arg: 'SIZE' },
  section: 'Output and resources',
  help: ['memory budget, e.g. 64MiB, 2GiB (default 512MiB)'],
  ...sizeValue(1024 * 1024, '1MiB'),
};

export const tempDirOption: OptionDef<string> = {
  cli: { flag: 'temp-dir', arg: 'DIR' },
  section: 'Output and resources',
  help: [
    'where spill files go (default: beside DIR); they take about 1.3x',
    'the input (records plus 24 bytes each: more for short records) and',
    'are removed range by range as the parts are written',
  ],
  ...textValue('a folder path'),
};

/**
 * The default thread count of a command that reads `inputs`, keeping column statistics or not:
 * none for small inputs (see inlineMaxBytes), else one per core.
 */
export function defaultThreads(inputs: string[], statistics: boolean): number {
  return smallInputs(inputs, statistics) ? 0 : Math.max(1, availableParallelism());
}
