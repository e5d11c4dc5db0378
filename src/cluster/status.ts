/**
 * `rowdeck status`: each stage's tasks, from the work folder alone: done (where and when), failed
 * (with the error), started (a private folder of a run in progress, or of one killed), or not
 * started; and what to run next.
 */
import { taskCommand } from './commands.js';
import type { ClusterPlan } from './plan.js';
import { attempts, readDone, readFailed, type StageName } from './records.js';

export type TaskState = 'done' | 'failed' | 'started' | 'not started';

export interface TaskStatus {
  stage: StageName;
  index: number;
  state: TaskState;
  host?: string;
  at?: string;
  error?: string;
  /** The command that runs it (again). */
  command: string;
}

export interface PlanStatus {
  planId: string;
  work: string;
  out: string;
  stages: { stage: StageName; total: number; done: number; failed: number; tasks: TaskStatus[] }[];
  /** What to run next, in words and commands. */
  next: string[];
}

export function planStatus(plan: ClusterPlan): PlanStatus {
  const stage = (name: Exclude<StageName, 'reread'>, count: number): PlanStatus['stages'][number] => {
    const tasks = Array.from({ length: count }, (_, i): TaskStatus => {
      const command = taskCommand(plan, name, i);
      const done = readDone(plan.work, name, i);
      if (done && done.planId === plan.planId) return { stage: name, index: i, state: 'done', host: done.host, at: done.endedAt, command };
      const failed = readFailed(plan.work, name, i);
      if (failed && failed.planId === plan.planId) return { stage: name, index: i, state: 'failed', host: failed.host, at: failed.at, error: `${failed.error.code}: ${failed.error.message}`, command };
      return { stage: name, index: i, state: attempts(plan.work, name, i).length > 0 ? 'started' : 'not started', command };
    });
    return { stage: name, total: count, done: tasks.filter((t) => t.state === 'done').length, failed: tasks.filter((t) => t.state === 'failed').length, tasks };
  };
  const stages = [stage('scatter', plan.scatter.length), stage('deal', 1), stage('gather', plan.gather.length)];
  const next: string[] = [];
  for (const s of stages) {
    if (s.done === s.total) continue;
    const waiting = s.tasks.filter((t) => t.state !== 'done');
    if (s.stage === 'deal') {
      // No stage of its own: the last scatter task makes it, else the gather tasks as they start.
      next.push(s.failed ? `deal: failed; mend the cause, then ${waiting[0]!.command} (or run any gather task: it makes the deal first)` : `deal: not made yet; the gather tasks make it as they start (alone: ${waiting[0]!.command})`);
      break;
    }
    next.push(`${s.stage}: ${waiting.length} of ${s.total} task(s) to run${s.failed ? ` (${s.failed} failed)` : ''}, e.g. ${waiting[0]!.command}`);
    break;
  }
  if (next.length === 0) next.push(`every task is done: ${taskCommand(plan, 'finish')}`);
  return { planId: plan.planId, work: plan.work, out: plan.out, stages, next };
}
