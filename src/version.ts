import { readFileSync } from 'node:fs';

/** The package version, read once from package.json (one source of truth). */
export const VERSION: string = (JSON.parse(readFileSync(new URL('../package.json', import.meta.url), 'utf8')) as { version: string }).version;
