/**
 * `verify --against` with the right inputs in the wrong order: the records are keyed by their
 * input and position, so the order of the inputs decides where each record went, and the same
 * files in another order do not give these parts. Told apart from other differences so the
 * message can say that order matters and which order the manifest has.
 */
import { basename } from 'node:path';

/**
 * The manifest's order and the order given, when the inputs given are the manifest's in another
 * order (by file name, or, where names differ, by their record counts); null otherwise.
 */
export function misorderedInputs(given: readonly string[], listed: readonly { path: string; records: number }[], perFile: readonly number[]): { expected: string; found: string } | null {
  if (given.length !== listed.length || given.length < 2) return null;
  const names = given.map((p) => basename(p));
  const listedNames = listed.map((f) => basename(f.path));
  const sameSet = (a: readonly (string | number)[], b: readonly (string | number)[]): boolean => JSON.stringify([...a].sort()) === JSON.stringify([...b].sort());
  const sameOrder = (a: readonly (string | number)[], b: readonly (string | number)[]): boolean => JSON.stringify(a) === JSON.stringify(b);
  const byName = sameSet(names, listedNames) && !sameOrder(names, listedNames);
  const counts = listed.map((f) => f.records);
  const byCount = !sameSet(names, listedNames) && perFile.length === counts.length && sameSet(perFile, counts) && !sameOrder(perFile, counts);
  if (!byName && !byCount) return null;
  return { expected: listed.map((f) => f.path).join(' '), found: given.join(' ') };
}
