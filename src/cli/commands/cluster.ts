/**
 * The commands that run a shuffle as tasks under a batch scheduler: `plan`, `task`, `finish`,
 * `status` (src/cluster/). Thin: arguments to the library, its result to the terminal.
 */
import { planCluster, loadPlan } from '../../cluster/plan.js';
import { runScatterTask } from '../../cluster/scatter-task.js';
import { dealIfScatterDone, runDealTask } from '../../cluster/deal.js';
import { runGatherTask } from '../../cluster/gather-task.js';
import { finishCluster } from '../../cluster/finish.js';
import { planStatus } from '../../cluster/status.js';
import { resolveTaskIndex } from '../../cluster/task-index.js';
import { taskCommand } from '../../cluster/commands.js';
import { FINISH_SPEC, PLAN_SPEC, resolveFinishOptions, resolveStatusOptions, resolveTaskOptions, STATUS_SPEC, TASK_SPEC} from '../../options.js';
import { parseCommandLine } from '../args.js';
import { FINISH_HELP, PLAN_HELP, STATUS_HELP, TASK_HELP } from '../help.js';
import type { CliIO } from '../main.js';

export async function runPlan(argv: string[], io: CliIO): Promise<number> {
  const { options, own: v } = parseCommandLine(PLAN_SPEC, argv);
  if (v.help) {
    io.stdout.write(PLAN_HELP);
    return 0;
  }
  const { plan, files } = await planCluster(options);
  if (v.json) io.stdout.write(JSON.stringify(plan, null, 2) + '\n');
  if (!v.quiet) {
    io.stderr.write(
      `rowdeck: plan ${plan.planId}: ${plan.scatter.length} scatter task(s) (the last to end makes the deal), ${plan.gather.length} gather task(s) over ${plan.size.buckets} buckets, then finish.\n` +
        `  written: ${files.join(', ')}\n` +
        `  Slurm:       sh ${plan.work}/slurm.sh [sbatch options]\n` +
        `  Kubernetes:  see the order of commands at the top of ${plan.work}/kubernetes.yaml\n` +
        `  by hand:     ${taskCommand(plan, 'scatter')} --index I   (each I), then the gather tasks and finish; rowdeck status ${plan.work}\n`,
    );
  }
  return 0;
}

export async function runTaskCommand(argv: string[], io: CliIO): Promise<number> {
  const { options, own: v } = parseCommandLine(TASK_SPEC, argv);
  if (v.help) {
    io.stdout.write(TASK_HELP);
    return 0;
  }
  const t = resolveTaskOptions(options);
  const stage = t.stage;
  const plan = loadPlan(t.work);
  const count = stage === 'scatter' ? plan.scatter.length : stage === 'gather' ? plan.gather.length : 1;
  const { index, from } = stage === 'deal' ? { index: 0, from: 'the stage' } : resolveTaskIndex(t.index, count, stage);
  const t0 = Date.now();
  const said = (ran: boolean): string => (ran ? `rowdeck: ${stage} task ${index} of plan ${plan.planId} done in ${((Date.now() - t0) / 1000).toFixed(1)} s (index from ${from}).\n` : `rowdeck: ${stage} task ${index} of plan ${plan.planId} was already done; nothing to do.\n`);
  if (stage === 'scatter') {
    // The last scatter task to end makes the deal step too.
    const ran = await runScatterTask(plan, index);
    if (!v.quiet) io.stderr.write(said(ran));
    const t1 = Date.now();
    let dealt: boolean;
    try {
      dealt = await dealIfScatterDone(plan);
    } catch (err) {
      io.stderr.write(`rowdeck: every scatter task is done, and the deal step this task went on to failed (this task's own work is kept; run it again, or ${taskCommand(plan, 'deal')}, once the cause is mended):\n`);
      throw err;
    }
    if (dealt && !v.quiet) io.stderr.write(`rowdeck: every scatter task is done: the deal step made in ${((Date.now() - t1) / 1000).toFixed(1)} s.\n`);
    return 0;
  }
  const ran = stage === 'gather' ? await runGatherTask(plan, index) : await runDealTask(plan);
  if (!v.quiet) io.stderr.write(said(ran));
  return 0;
}

export async function runFinish(argv: string[], io: CliIO): Promise<number> {
  const { options, own: v } = parseCommandLine(FINISH_SPEC, argv);
  if (v.help) {
    io.stdout.write(FINISH_HELP);
    return 0;
  }
  const f = resolveFinishOptions(options);
  const plan = loadPlan(f.work);
  const run = await finishCluster(plan, { keepWork: f.keepWork === true, ...(f.threads !== undefined ? { threads: f.threads } : {}), onNotice: (text) => io.stderr.write(`rowdeck: ${text}\n`) });
  if (v.json) io.stdout.write(JSON.stringify(run.manifest, null, 2) + '\n');
  if (!v.quiet) io.stderr.write(`rowdeck: ${run.manifest.input.records.toLocaleString('en-US')} records -> ${run.manifest.output.parts.length} part(s) in ${run.out} (plan ${plan.planId}, ${plan.scatter.length} scatter and ${plan.gather.length} gather tasks).\n`);
  return 0;
}

export async function runStatus(argv: string[], io: CliIO): Promise<number> {
  const { options, own: v } = parseCommandLine(STATUS_SPEC, argv);
  if (v.help) {
    io.stdout.write(STATUS_HELP);
    return 0;
  }
  const s = planStatus(loadPlan(resolveStatusOptions(options as { work: string }).work));
  if (v.json) {
    io.stdout.write(JSON.stringify(s, null, 2) + '\n');
    return 0;
  }
  const lines = [`plan ${s.planId}: ${s.work} -> ${s.out}`];
  for (const st of s.stages) {
    lines.push(`${st.stage.padEnd(8)} ${st.done}/${st.total} done${st.failed ? `, ${st.failed} failed` : ''}`);
    for (const t of st.tasks) {
      if (t.state === 'done' && st.total > 8) continue;
      lines.push(`  ${String(t.index).padStart(4)}  ${t.state.padEnd(11)} ${t.host ?? ''} ${t.at ?? ''}${t.error ? `\n        ${t.error}` : ''}`);
    }
  }
  lines.push('next:', ...s.next.map((n) => `  ${n}`));
  io.stdout.write(lines.join('\n') + '\n');
  return 0;
}
