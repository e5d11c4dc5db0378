/**
 * Debian's chromium, run headless as the browser test needs it: a fresh profile each time, no
 * sandbox (CI runs as root), and no background network traffic (the machine has no network).
 * `.ci/run` installs it; findChromium() is null where it is absent, and the test then skips.
 */
import { spawnSync } from 'node:child_process';
import { existsSync, mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { pathToFileURL } from 'node:url';
import { flags } from '../../src/flags.js';

export function findChromium(): string | null {
  const given = flags.chromium;
  if (given) return existsSync(given) ? given : null;
  for (const p of ['/usr/bin/chromium', '/usr/bin/chromium-browser']) if (existsSync(p)) return p;
  return null;
}

export interface Rendered {
  /** The DOM the browser built, serialised (--dump-dom). */
  dom: string;
  /** The screenshot (PNG bytes). */
  png: Buffer;
  stderr: string;
}

/** Opens `file` in headless chromium at width × height; returns its DOM and a screenshot. */
export function renderInChromium(chromium: string, file: string, width: number, height: number): Rendered {
  const profile = mkdtempSync(join(tmpdir(), 'rowdeck-chromium-'));
  const shot = join(profile, 'shot.png');
  try {
    const r = spawnSync(
      chromium,
      [
        '--headless',
        '--no-sandbox',
        '--disable-gpu',
        '--disable-background-networking',
        '--disable-component-update',
        '--disable-sync',
        '--no-first-run',
        '--hide-scrollbars',
        `--user-data-dir=${profile}`,
        `--window-size=${width},${height}`,
        `--screenshot=${shot}`,
        '--dump-dom',
        pathToFileURL(file).href,
      ],
      { encoding: 'utf8', timeout: 90_000, maxBuffer: 64 << 20 },
    );
    if (r.error) throw r.error;
    if (!existsSync(shot)) throw new Error(`chromium wrote no screenshot (exit ${r.status}): ${r.stderr.slice(-2000)}`);
    return { dom: r.stdout, png: readFileSync(shot), stderr: r.stderr };
  } finally {
    rmSync(profile, { recursive: true, force: true });
  }
}
