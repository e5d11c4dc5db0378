import { readFileSync } from 'node:fs';

/**
 * The package version, read once from package.json (one source of truth): one folder up from
 * dist/version.js, two from the bundled command line (dist/cli/rowdeck.cjs, scripts/bundle.mjs).
 */
function readVersion(): string {
  for (const rel of ['../package.json', '../../package.json']) {
    try {
      const pkg = JSON.parse(readFileSync(new URL(rel, import.meta.url), 'utf8')) as { name?: string; version: string };
      if (pkg.name === 'rowdeck') return pkg.version;
    } catch {
      // Not there: the other place.
    }
  }
  throw new Error('internal: rowdeck\'s package.json not found beside its code');
}

export const VERSION: string = readVersion();
