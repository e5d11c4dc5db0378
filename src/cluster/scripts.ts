/**
 * The two ready files `rowdeck plan` writes beside plan.json: a shell script that submits the
 * stages to Slurm as array jobs chained by `afterok`, and Kubernetes Indexed Jobs, one a stage.
 * Pure: text from the plan's figures.
 */

export interface ScriptPlan {
  /** Absolute paths, as every node sees them (a shared file system). */
  work: string;
  /** The Node.js binary and rowdeck's command-line entry, as the nodes see them. */
  node: string;
  cli: string;
  scatterTasks: number;
  gatherTasks: number;
  /** Worker threads of each task (its CPUs). */
  threads: number;
  /** Memory to ask for, per task, in MiB (the budget and the documented overheads). */
  memoryMiB: number;
  /** A short id of the plan, for job names. */
  planId: string;
  kubernetes: { image: string; claim: string; mountPath: string };
}

/** Single quotes for the shell: the text as one word, whatever it holds. */
export function shellQuote(s: string): string {
  return `'${s.replaceAll("'", `'\\''`)}'`;
}

/** A plan's steps, each run by `rowdeck task` or `finish`. */
export type Stage = 'scatter' | 'deal' | 'gather' | 'finish';
/** The stages a scheduler runs, one after the other: the last scatter task makes the deal (deal.ts). */
export const STAGES = ['scatter', 'gather', 'finish'] as const satisfies readonly Stage[];

/** The command a task of `stage` runs (the index comes from the scheduler's variable). */
export function stageCommand(p: Pick<ScriptPlan, 'node' | 'cli' | 'work'>, stage: Stage): string[] {
  return stage === 'finish' ? [p.node, p.cli, 'finish', p.work] : [p.node, p.cli, 'task', p.work, '--stage', stage];
}

export function renderSlurm(p: ScriptPlan): string {
  const q = shellQuote;
  const cmd = (stage: Stage): string => stageCommand(p, stage).map(q).join(' ');
  const log = (stage: string, array: boolean): string => q(`${p.work}/logs/${stage}${array ? '-%a' : ''}.log`);
  return `#!/bin/sh
# Submits the stages of a rowdeck plan to Slurm, each an array job that starts once the one
# before it has ended without error (afterok). Written by \`rowdeck plan\`; plan ${p.planId}.
#
#   sh ${p.work}/slurm.sh [sbatch options]      e.g. --partition=batch --account=lab
#
# Options given here go to every sbatch call. The job ids are printed; \`rowdeck status ${p.work}\`
# shows each task's state, and a failed task can be run again on its own:
#   ${cmd('scatter')} --index I
# The last scatter task to end also makes the deal step (alone: ${cmd('deal')}).
set -eu
mkdir -p ${q(`${p.work}/logs`)}
scatter=$(sbatch --parsable "$@" --job-name=rowdeck-scatter-${p.planId} --array=0-${p.scatterTasks - 1} \\
  --cpus-per-task=${Math.max(1, p.threads)} --mem=${p.memoryMiB}M --output=${log('scatter', true)} \\
  --wrap ${q(cmd('scatter'))})
gather=$(sbatch --parsable "$@" --job-name=rowdeck-gather-${p.planId} --dependency=afterok:"$scatter" --array=0-${p.gatherTasks - 1} \\
  --cpus-per-task=${Math.max(1, p.threads)} --mem=${p.memoryMiB}M --output=${log('gather', true)} \\
  --wrap ${q(cmd('gather'))})
finish=$(sbatch --parsable "$@" --job-name=rowdeck-finish-${p.planId} --dependency=afterok:"$gather" \\
  --cpus-per-task=${Math.max(1, p.threads)} --mem=${p.memoryMiB}M --output=${log('finish', false)} \\
  --wrap ${q(cmd('finish'))})
echo "scatter $scatter"
echo "gather $gather"
echo "finish $finish"
`;
}

/** A YAML scalar in double quotes (JSON's escapes are YAML's). */
const yq = (s: string): string => JSON.stringify(s);

export function renderKubernetes(p: ScriptPlan): string {
  const job = (stage: Stage, completions: number): string => {
    const name = `rowdeck-${stage}-${p.planId}`;
    return `apiVersion: batch/v1
kind: Job
metadata:
  name: ${name}
  labels:
    app.kubernetes.io/name: rowdeck
    rowdeck/plan: ${yq(p.planId)}
    rowdeck/stage: ${stage}
spec:
  completionMode: Indexed
  completions: ${completions}
  parallelism: ${completions}
  backoffLimit: 3
  template:
    metadata:
      labels:
        rowdeck/plan: ${yq(p.planId)}
        rowdeck/stage: ${stage}
    spec:
      restartPolicy: Never
      containers:
        - name: ${stage}
          image: ${yq(p.kubernetes.image)}
          command: [${stageCommand(p, stage).map(yq).join(', ')}]
          resources:
            requests:
              cpu: ${yq(String(Math.max(1, p.threads)))}
              memory: ${yq(`${p.memoryMiB}Mi`)}
            limits:
              memory: ${yq(`${p.memoryMiB}Mi`)}
          volumeMounts:
            - name: shared
              mountPath: ${yq(p.kubernetes.mountPath)}
      volumes:
        - name: shared
          persistentVolumeClaim:
            claimName: ${yq(p.kubernetes.claim)}
`;
  };
  const apply = (stage: Stage): string =>
    `#   kubectl apply -f kubernetes.yaml -l rowdeck/stage=${stage} && kubectl wait --for=condition=complete --timeout=-1s job/rowdeck-${stage}-${p.planId}`;
  return `# Kubernetes Indexed Jobs for the stages of a rowdeck plan (plan ${p.planId}), written by
# \`rowdeck plan\`. Each task reads its index from JOB_COMPLETION_INDEX. The shared volume (a
# ReadWriteMany PersistentVolumeClaim, "${p.kubernetes.claim}", mounted at ${p.kubernetes.mountPath}) must hold the
# inputs, ${p.work} and the output folder at the paths the plan names, and the image must run
# ${p.node} ${p.cli}.
#
# Apply the stages in this order, each once the one before has completed (the last scatter task
# to end also makes the deal step):
${STAGES.map(apply).join('\n')}
# (\`rowdeck status ${p.work}\` shows which tasks are done, and what to run next.)
${STAGES.map((stage) => `---\n${job(stage, stage === 'scatter' ? p.scatterTasks : stage === 'gather' ? p.gatherTasks : 1)}`).join('')}`;
}
