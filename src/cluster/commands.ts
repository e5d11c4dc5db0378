/** The command lines that run a plan's tasks, as `status` and error messages print them. */
import { shellQuote, stageCommand, type Stage } from './scripts.js';
import type { ClusterPlan } from './plan.js';

/** The command that runs task `index` of `stage` (deal and finish have one task). */
export function taskCommand(plan: Pick<ClusterPlan, 'runner' | 'work'>, stage: Stage, index?: number): string {
  const words = stageCommand({ node: plan.runner.node, cli: plan.runner.cli, work: plan.work }, stage).map(shellQuote);
  if (index !== undefined && (stage === 'scatter' || stage === 'gather')) words.push('--index', String(index));
  return words.join(' ');
}
