import { RowdeckError } from '../../errors.js';
import type { CliIO } from '../main.js';
import { PROFILE_HELP } from '../help.js';

export async function run(argv: string[], io: CliIO): Promise<number> {
  if (argv.includes('--help') || argv.includes('-h')) {
    io.stdout.write(PROFILE_HELP);
    return 0;
  }
  throw new RowdeckError('ERR_INTERNAL', 'profile is not available yet.');
}
