/**
 * The commands that run a shuffle as tasks under a batch scheduler: `plan` (every shuffle option
 * but the spill's folder, and its own), `task`, `finish` and `status`. Tables and resolvers as
 * for the other commands, so their options are read, checked, spelled and listed the same way.
 */
import { RowdeckError } from '../errors.js';
import { resolveShuffleOptions, SHUFFLE_OPTIONS, type ResolvedShuffleOptions, type ShuffleOptions } from './shuffle.js';
import { threadsOption, withHelp } from './input.js';
import {
  booleanValue,
  choiceValue,
  fromCommandLine,
  integerValue,
  optionName,
  readOptions,
  surfaceOf,
  textValue,
  type Checker,
  type CommandSpec,
  type OptionDef,
  type Surface,
} from './spec.js';

const P = 'Plan';

export interface PlanOptions extends ShuffleOptions {
  /** The work folder (new or empty), on a file system every node sees at the same path. */
  work: string;
  /** Scatter tasks wanted. */
  tasks: number;
  /** Gather tasks; default: as many as scatter tasks. */
  gatherTasks?: number;
  /** For kubernetes.yaml: the container image, the ReadWriteMany claim, and where it is mounted. */
  image?: string;
  claim?: string;
  mountPath?: string;
}

// The spill's folder is the work folder; threads are each task's (listed with plan's own options).
const { tempDir: _spillFolder, threads: _threads, ...shuffleButSpill } = SHUFFLE_OPTIONS;

/** A plan's budget a task where --memory is not given (the machine planning is not the nodes). */
export const PLAN_DEFAULT_MEMORY = '512MiB';

export const PLAN_OPTIONS = {
  ...shuffleButSpill,
  work: {
    cli: { flag: 'work', arg: 'WORK' },
    section: P,
    required: "a new folder on a file system every node sees, for the tasks' files",
    help: ['the work folder (new or empty); it needs about 2.3x the input free'],
    ...textValue('a folder path'),
  },
  tasks: {
    cli: { flag: 'tasks', arg: 'N' },
    section: P,
    required: 'the number of scatter tasks to cut the inputs into',
    help: ['scatter tasks (fewer when the inputs cannot be cut so: a gzip file is', 'read whole by one task)'],
    ...integerValue(1, 100000),
  },
  gatherTasks: {
    cli: { flag: 'gather-tasks', arg: 'M' },
    section: P,
    help: ['gather tasks (default N; at most the bucket count)'],
    ...integerValue(1, 100000),
  },
  memory: withHelp(SHUFFLE_OPTIONS.memory, [
    "each task's budget (default 512MiB: this machine's memory says",
    "nothing of the nodes'); the tasks spill to files in WORK, and a",
    'gather task splits a bucket too large for it (same bytes)',
  ], P),
  threads: {
    ...SHUFFLE_OPTIONS.threads,
    cli: { flag: 'threads', arg: 'T' },
    section: P,
    help: ["threads of each task (default: this machine's cores); Slurm asks for", 'T CPUs and the memory budget plus 512 MiB a task'],
  },
  image: {
    cli: { flag: 'image', arg: 'NAME' },
    section: P,
    help: ['the container image of kubernetes.yaml (default node:20-bookworm); it', 'must run this rowdeck at the path the plan names'],
    ...textValue('an image name'),
  },
  claim: {
    cli: { flag: 'claim', arg: 'NAME' },
    section: P,
    help: ['the ReadWriteMany PersistentVolumeClaim holding the inputs, WORK and DIR', '(default rowdeck-shared)'],
    ...textValue('a claim name'),
  },
  mountPath: {
    cli: { flag: 'mount-path', arg: 'PATH' },
    section: P,
    help: ['where the pods mount it (default /)'],
    text: true,
    check: (v: unknown, c: Checker) => (typeof v === 'string' && v.startsWith('/') ? v : c.fail('an absolute path', v)),
  },
} satisfies { [K in keyof Required<Omit<PlanOptions, 'tempDir'>>]: OptionDef<NonNullable<PlanOptions[K]>> };

export const PLAN_SPEC: CommandSpec<PlanOptions> = {
  command: 'plan',
  libraryName: 'planCluster',
  table: PLAN_OPTIONS,
  cliOnly: {
    json: { flag: 'json', section: P, help: ['print the plan on stdout'] },
    quiet: { flag: 'quiet', section: P, help: ['no summary on stderr'] },
    help: { flag: 'help', short: 'h', section: P, help: ['print this help'] },
  },
};

export interface ResolvedPlanOptions {
  shuffle: ResolvedShuffleOptions;
  /** Whether a thread count was given (a plan's default is this machine's cores, whatever the input's size). */
  threadsGiven: boolean;
  work: string;
  tasks: number;
  gatherTasks: number | null;
  image: string | null;
  claim: string | null;
  mountPath: string;
  surface: Surface;
}

export function resolvePlanOptions(options: PlanOptions): ResolvedPlanOptions {
  const surface = surfaceOf(options);
  if (typeof options === 'object' && options !== null && Object.hasOwn(options, 'tempDir')) {
    throw new RowdeckError(
      'RDK_OPTION',
      `Invalid option ${optionName(surface, 'tempDir')}: a plan keeps its spill in the work folder (${optionName(surface, 'work')}), where every task can read it; leave ${optionName(surface, 'tempDir')} out.`,
      { option: 'tempDir' },
    );
  }
  const o = readOptions(PLAN_SPEC, options, surface) as Partial<PlanOptions> & Pick<PlanOptions, 'work' | 'tasks'>;
  const { work, tasks, gatherTasks, image, claim, mountPath, ...rest } = o;
  // The nodes' memory is not this machine's: without --memory a task's budget is a fixed one.
  const shuffleOptions = { ...rest, memory: rest.memory ?? PLAN_DEFAULT_MEMORY } as ShuffleOptions;
  return {
    shuffle: resolveShuffleOptions(surface === 'cli' ? fromCommandLine(shuffleOptions) : shuffleOptions),
    threadsGiven: o.threads !== undefined,
    work,
    tasks,
    gatherTasks: gatherTasks ?? null,
    image: image ?? null,
    claim: claim ?? null,
    mountPath: mountPath ?? '/',
    surface,
  };
}

// --- task, finish, status: a plan's work folder and a few switches ---------------------------------

const T = 'Options';

const workFolder: OptionDef<string> = {
  cli: { positional: 'WORK', many: false },
  required: 'the work folder of a plan (rowdeck plan --work)',
  ...textValue('a folder path'),
};

export interface TaskOptions {
  work: string;
  stage: 'scatter' | 'deal' | 'gather';
  /** The task's number; default: from the scheduler's environment (see cluster/task-index.ts). */
  index?: string;
}

export const TASK_SPEC: CommandSpec<TaskOptions> = {
  command: 'task',
  table: {
    work: workFolder,
    stage: { cli: { flag: 'stage', arg: 'S' }, section: T, required: 'the stage to run: scatter, deal or gather', help: ['scatter, deal or gather'], ...choiceValue(['scatter', 'deal', 'gather'] as const) },
    // Text: checked against the plan's task count (resolveTaskIndex), as an index from the scheduler is.
    index: { cli: { flag: 'index', arg: 'I' }, section: T, help: ["the task's number, from 0"], ...textValue('a task number') },
  } satisfies { [K in keyof Required<TaskOptions>]: OptionDef<NonNullable<TaskOptions[K]>> },
  cliOnly: {
    quiet: { flag: 'quiet', section: T, help: ['no line on stderr when done'] },
    help: { flag: 'help', short: 'h', section: T, help: ['print this help'] },
  },
};

export function resolveTaskOptions(options: TaskOptions): TaskOptions {
  // `work` and `stage` are required: readOptions refuses options without them.
  return readOptions(TASK_SPEC, options) as TaskOptions;
}

export interface FinishCommandOptions {
  work: string;
  /** Keep the work folder (default: removed once the output is in place). */
  keepWork?: boolean;
  /** Threads that join and hash the parts (default: the machine's cores). */
  threads?: number;
}

export const FINISH_SPEC: CommandSpec<FinishCommandOptions> = {
  command: 'finish',
  table: {
    work: workFolder,
    keepWork: { cli: { flag: 'keep-work' }, section: T, help: ['keep WORK afterwards'], ...booleanValue() },
    threads: { ...threadsOption, section: T, help: ["threads that join and hash the parts (default: this machine's", 'cores, whatever the plan said for its tasks); 0: none'] },
  } satisfies { [K in keyof Required<FinishCommandOptions>]: OptionDef<NonNullable<FinishCommandOptions[K]>> },
  cliOnly: {
    json: { flag: 'json', section: T, help: ['print the manifest on stdout'] },
    quiet: { flag: 'quiet', section: T, help: ['no summary line on stderr'] },
    help: { flag: 'help', short: 'h', section: T, help: ['print this help'] },
  },
};

export function resolveFinishOptions(options: FinishCommandOptions): FinishCommandOptions {
  // `work` is required: readOptions refuses options without it.
  return readOptions(FINISH_SPEC, options) as FinishCommandOptions;
}

export const STATUS_SPEC: CommandSpec<{ work: string }> = {
  command: 'status',
  table: { work: workFolder } satisfies { work: OptionDef<string> },
  cliOnly: {
    json: { flag: 'json', section: T, help: ['print the status as JSON on stdout'] },
    help: { flag: 'help', short: 'h', section: T, help: ['print this help'] },
  },
};

export function resolveStatusOptions(options: { work: string }): { work: string } {
  return readOptions(STATUS_SPEC, options) as { work: string };
}
