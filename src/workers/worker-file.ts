/** Where a compiled worker entry lives: beside this module in dist/workers/, or there from the bundled command line or from src/. */
import { existsSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { RowdeckError } from '../errors.js';

export function resolveWorkerFile(name = 'shuffle-worker.js'): string {
  const here = dirname(fileURLToPath(import.meta.url));
  const beside = join(here, name);
  if (existsSync(beside)) return beside;
  // From the bundled command line (dist/cli/rowdeck.cjs), and from src/ when tests run the sources.
  for (const built of [join(here, '..', 'workers', name), join(here, '..', '..', 'dist', 'workers', name)]) if (existsSync(built)) return built;
  throw new RowdeckError('RDK_INTERNAL', `worker module not found at ${beside}; run "npm run build" first.`);
}
