/**
 * `verify --against`'s replay as a check: the shuffle run again from the manifest's seed and
 * options (replay.ts), unless it cannot be (another dealing scheme, standard input, inputs in
 * another order, --no-replay), and what it gives compared with the manifest and the files read.
 */
import { isStreamInput } from '../../io/input.js';
import { RowdeckError } from '../../errors.js';
import type { ResolvedVerifyOptions } from '../../options.js';
import type { Manifest } from '../manifest.js';
import { compareReplay, environmentFault, replayable, replayShuffle } from '../replay.js';
import type { AgainstProgress } from './against.js';
import { MANIFEST_FILE } from './checks.js';
import type { PartScan } from './part-scan.js';
import { Findings, type VerifyReport } from './report.js';

export interface ReplayResult {
  findings: Findings;
  replay: VerifyReport['replay'];
}

/** Replays the run over `inputs` (see replay.ts); `misordered`: the inputs' order when it is not the manifest's. */
export async function checkReplay(
  inputs: string[],
  dir: string,
  m: Manifest,
  scans: PartScan[],
  misordered: { expected: string; found: string } | null,
  options: Pick<ResolvedVerifyOptions, 'replay' | 'surface' | 'tempDir' | 'threads' | 'memory'>,
  progress: AgainstProgress,
): Promise<ReplayResult> {
  const out = new Findings();
  const M = MANIFEST_FILE;
  const parts = m.output.parts;
  let replay: VerifyReport['replay'] = null;
  const can = replayable(m);
  const R = '(replay)';
  if (options.replay === false) replay = { status: 'skipped', seed: m.seed, note: `not asked for (${options.surface === 'cli' ? '--no-replay' : 'replay: false'})` };
  else if (!can.ok) replay = { status: 'skipped', seed: m.seed, note: can.why };
  else if (inputs.some((p) => isStreamInput(p))) replay = { status: 'skipped', seed: m.seed, note: 'standard input or a pipe can be read only once' };
  else if (misordered) replay = { status: 'skipped', seed: m.seed, note: `the inputs are given in another order than the manifest's (${misordered.expected}), and the order decides where each record goes` };
  if (replay) out.skip(R, 'replay', replay.note);
  else {
    progress({ stage: 'replay', done: 0, total: 1, records: 0 });
    let replayed: Manifest | null = null;
    try {
      replayed = await replayShuffle(m, inputs, dir, {
        ...(options.tempDir !== undefined ? { tempDir: options.tempDir } : {}),
        ...(options.threads !== undefined ? { threads: options.threads } : {}),
        ...(options.memory !== undefined ? { memory: options.memory } : {}),
      });
    } catch (err) {
      const env = environmentFault(err);
      if (env || !(err instanceof RowdeckError)) throw env ?? err;
      out.judge(R, 'replay', [{ expected: `the shuffle to run again with seed ${JSON.stringify(m.seed)} and the manifest's options`, found: err.message }]);
      replay = { status: 'failed', seed: m.seed, note: `the run could not be repeated: ${err.message}` };
    }
    if (replayed) {
      const files = scans.map((sc) => (sc.present && sc.sha256 !== '' ? { bytes: sc.bytes, sha256: sc.sha256 } : null));
      const diff = compareReplay(m, replayed, files);
      let ok = out.judge(M, 'replay', diff.whole.map(({ item, expected, found }) => ({ item, expected, found })), "the shuffle run again from the manifest's seed and options; expected: what it gives");
      parts.forEach((p, k) => {
        if (!out.judge(p.path, 'replay', diff.parts[k]!.map(({ item, expected, found }) => ({ item, expected, found })), "the shuffle run again from the manifest's seed and options; expected: what it gives")) ok = false;
      });
      replay = ok
        ? { status: 'passed', seed: m.seed, note: `the shuffle run again with seed ${JSON.stringify(m.seed)} and the manifest's options gives exactly these parts` }
        : { status: 'failed', seed: m.seed, note: `the parts or the manifest are not what seed ${JSON.stringify(m.seed)} with the manifest's options gives (an edited seed or option, or altered parts)` };
    }
  }
  return { findings: out, replay };
}
