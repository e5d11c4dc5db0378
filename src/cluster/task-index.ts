/**
 * Which task of an array job this process is: `--index`, or the array index a batch scheduler
 * puts in the environment. Schedulers count from 0 (Slurm, Kubernetes Indexed Jobs, AWS Batch,
 * PBS Pro) or from 1 (Grid Engine, LSF); rowdeck's task indexes count from 0.
 */
import { RowdeckError } from '../errors.js';

/** The variables looked at, in this order, and the number each scheduler counts from. */
export const INDEX_VARIABLES: readonly { name: string; base: 0 | 1; scheduler: string }[] = [
  { name: 'SLURM_ARRAY_TASK_ID', base: 0, scheduler: 'Slurm' },
  { name: 'JOB_COMPLETION_INDEX', base: 0, scheduler: 'Kubernetes (Indexed Job)' },
  { name: 'AWS_BATCH_JOB_ARRAY_INDEX', base: 0, scheduler: 'AWS Batch' },
  { name: 'PBS_ARRAY_INDEX', base: 0, scheduler: 'PBS' },
  { name: 'SGE_TASK_ID', base: 1, scheduler: 'Grid Engine' },
  { name: 'LSB_JOBINDEX', base: 1, scheduler: 'LSF' },
];

/**
 * The task index in [0, count): `given` (from --index) when set, else the first scheduler
 * variable that is set. A missing, malformed or out-of-range index is a usage error naming
 * where it came from and the variables looked at.
 */
export function resolveTaskIndex(given: string | number | undefined, count: number, stage: string, env: NodeJS.ProcessEnv = process.env): { index: number; from: string } {
  const range = `0 to ${count - 1}`;
  const check = (text: string, base: 0 | 1, from: string): { index: number; from: string } => {
    if (!/^\s*\d+\s*$/.test(text)) {
      throw new RowdeckError('RDK_OPTION', `Invalid task index from ${from}: expected a whole number, got ${JSON.stringify(text)}.`, { option: 'index' });
    }
    const index = Number(text) - base;
    if (index < 0 || index >= count) {
      const shown = base === 1 ? `${text} (counted from 1, so task ${index})` : text;
      throw new RowdeckError('RDK_OPTION', `Task index ${shown} from ${from} is out of range: the ${stage} stage of this plan has ${count} task(s), ${range}.`, { option: 'index' });
    }
    return { index, from };
  };
  if (given !== undefined) return check(String(given), 0, '--index');
  for (const v of INDEX_VARIABLES) {
    const text = env[v.name];
    if (text !== undefined && text !== '') return check(text, v.base, `${v.name} (${v.scheduler})`);
  }
  throw new RowdeckError(
    'RDK_MISSING_ARGUMENT',
    `No task index: pass --index I (${range}), or run under a scheduler that sets one of ${INDEX_VARIABLES.map((v) => v.name).join(', ')}.`,
    { option: 'index' },
  );
}
