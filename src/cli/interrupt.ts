/**
 * One line on stderr when a signal stops a command (Ctrl-C is SIGINT), then the signal's own
 * ending. `shuffle` (and `verify --against`'s replay) hook the signals themselves once they have
 * work folders to remove, and say what they removed: while such a hook is there, this one stays
 * quiet, and stays quiet too when that hook raises the signal again after its line.
 */
const SIGNALS: NodeJS.Signals[] = ['SIGINT', 'SIGTERM', 'SIGHUP', 'SIGQUIT'];

export function hookInterrupt(command: string, write: (line: string) => void): () => void {
  let told = false;
  const onSignal = (sig: NodeJS.Signals): void => {
    // Another listener (the run's own cleanup) handles it and prints its line.
    if (process.listenerCount(sig) > 1) {
      told = true;
      return;
    }
    unhook();
    if (!told) {
      try {
        write(`rowdeck: ${command} stopped by ${sig}.\n`);
      } catch {
        // No terminal any more (SIGHUP): nothing to tell.
      }
    }
    process.kill(process.pid, sig);
  };
  const unhook = (): void => {
    for (const s of SIGNALS) process.removeListener(s, onSignal);
  };
  for (const s of SIGNALS) process.on(s, onSignal);
  return unhook;
}
