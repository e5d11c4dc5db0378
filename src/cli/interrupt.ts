/**
 * One line on stderr when a signal stops a command (Ctrl-C is SIGINT), then the signal's own
 * ending. `shuffle` (and `verify --against`'s replay) hook the signals themselves once they have
 * work folders to remove, and say what they removed: while such a hook is there, this one steps
 * aside (the signal that hook raises again after its line must end the process at once).
 */
const SIGNALS: NodeJS.Signals[] = ['SIGINT', 'SIGTERM', 'SIGHUP', 'SIGQUIT'];

export function hookInterrupt(command: string, write: (line: string) => void): () => void {
  const onSignal = (sig: NodeJS.Signals): void => {
    unhook();
    // Another listener (the run's own cleanup) handles it, prints its line and raises the signal
    // again: out of its way, so that ends the process at once.
    if (process.listenerCount(sig) > 0) return;
    try {
      write(`rowdeck: ${command} stopped by ${sig}.\n`);
    } catch {
      // No terminal any more (SIGHUP): nothing to tell.
    }
    process.kill(process.pid, sig);
  };
  const unhook = (): void => {
    for (const s of SIGNALS) process.removeListener(s, onSignal);
  };
  for (const s of SIGNALS) process.on(s, onSignal);
  return unhook;
}
