/**
 * `profile()`: schema, column statistics and class balance of the inputs, in one streaming read.
 * Its steps: the options resolved and the inputs' formats chosen; quantile bin edges where a
 * stratify column asks for bins (the same first pass as shuffle makes); the read, counted on
 * worker threads (profile/read.ts, profile/task.ts); the threads' counts merged
 * (profile/statistics.ts); the result and its warnings (profile/assemble.ts, profile/warnings.ts).
 *
 * The statistics merge exactly and without regard to order (see core/stats.ts), and stratum
 * counts are sums, so the profile does not depend on the thread count or on which worker saw
 * which batch. Strata use the same keys as `shuffle` (fieldKey, quantile bin labels), so a
 * profile's classes are the classes a shuffle deals; warnings about classes too small for the
 * planned partitions or folds come from the same dealing tables a shuffle with the default seed
 * would build.
 *
 * Memory stays bounded: a few batches in flight per worker, value tables capped per column
 * (then a fixed-size distinct estimate), and one counter per stratum.
 */
import { statSync } from 'node:fs';
import { deriveSecret, type Secret } from '../core/hash.js';
import { detectFormat, isStreamInput } from '../io/input.js';
import { chooseFormats } from '../io/sniff.js';
import { DEFAULT_SEED, optionSetting, resolveProfileOptions, type ProfileOptions, type ResolvedProfileOptions } from '../options.js';
import { computeBinEdges, type BinEdges } from './quantiles.js';
import { assembleProfile } from './profile/assemble.js';
import { readAndCount } from './profile/read.js';
import type { Profile } from './profile/result.js';
import { mergeStatistics } from './profile/statistics.js';

export type { ProfileOptions, ProfileProgress } from '../options.js';
export { PROFILE_VERSION, type Profile, type ProfileClass, type ProfileInput, type ProfileStrata, type ProfileWarning, type ProfileWarningCode } from './profile/result.js';
export { COLUMN_SHARE_MIN, columnShare, joinColumnShares } from './profile/task.js';

export async function profile(options: ProfileOptions): Promise<Profile> {
  const o = await resolveInputs(options);
  const t0 = Date.now();
  const secret = deriveSecret(DEFAULT_SEED);
  const totalBytes = inputBytes(o.inputs);
  const binEdges = await quantileBins(o, secret, totalBytes);
  const binsMs = Date.now() - t0;
  const tRead = Date.now();
  const read = await readAndCount(o, binEdges, totalBytes, tRead);
  const readMs = Date.now() - tRead;
  const statistics = mergeStatistics(o, read);
  return assembleProfile(o, read, statistics, { binEdges, secret, binsMs, readMs, t0 });
}

/** The options checked, and the inputs' format chosen. */
async function resolveInputs(options: ProfileOptions): Promise<ResolvedProfileOptions> {
  const o = resolveProfileOptions(options);
  // The inputs' format, as a shuffle of them would read them (see io/sniff.ts); inputs named
  // as different formats are each read as their name says (null).
  o.format = await chooseFormats(o.inputs, o.format, (v) => optionSetting(o.surface, 'format', v), 'profile', true);
  return o;
}

/** The inputs' bytes, for progress: unknown (0: no bar) when any input is a stream, whose size is not known before it ends. */
function inputBytes(inputs: string[]): number {
  return inputs.some(isStreamInput) ? 0 : inputs.reduce((a, p) => {
    try {
      return a + statSync(p).size;
    } catch {
      return a; // reported with its path when opened
    }
  }, 0);
}

/** The edges of the COL:bins=Q columns (none without them). */
async function quantileBins(o: ResolvedProfileOptions, secret: Secret, totalBytes: number): Promise<BinEdges[]> {
  // Quantile bins need their edges before any record has a stratum: the same first pass as
  // shuffle makes (so the labels match a shuffle with the default seed and memory budget).
  let binEdges: BinEdges[] = [];
  const binCols = o.stratify.filter((s) => s.bins > 0);
  if (binCols.length > 0) {
    o.onProgress?.({ stage: 'bins', done: 0, total: totalBytes, records: 0, elapsedMs: 0 });
    binEdges = await computeBinEdges({
      inputs: o.inputs,
      format: o.format ?? detectFormat(o.inputs[0]!),
      delimiter: o.delimiter,
      header: o.header,
      onBadRecord: o.onBadRecord,
      columns: binCols,
      secret,
    });
  }
  return binEdges;
}
