import { RowdeckError } from '../../errors.js';
import type { CliIO } from '../main.js';
import { VERIFY_HELP } from '../help.js';

export async function run(argv: string[], io: CliIO): Promise<number> {
  if (argv.includes('--help') || argv.includes('-h')) {
    io.stdout.write(VERIFY_HELP);
    return 0;
  }
  throw new RowdeckError('ERR_INTERNAL', 'verify is not available yet.');
}
