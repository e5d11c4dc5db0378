/**
 * Help texts. Kept together so the wording stays consistent across commands. Each command's
 * option list is made from its option table (src/options/), so --help names every option the
 * command takes, and nothing else.
 */
import { FINISH_SPEC, PLAN_SPEC, PROFILE_SPEC, renderOptionList, REPORT_SPEC, SHUFFLE_SPEC, STATUS_SPEC, TASK_SPEC, VERIFY_SPEC } from '../options.js';

export const MAIN_HELP = `rowdeck — reproducible, stratified shuffling of large tabular files

Usage:
  rowdeck shuffle INPUT... --out DIR [options]   shuffle and deal into partitions, splits, folds
  rowdeck profile INPUT... [options]             schema, statistics and class balance of inputs
  rowdeck verify DIR [--against INPUT...]        check an output folder against its manifest
  rowdeck report DIR [--verify]                  write DIR/report.html: the result as charts

Past one machine (the same shuffle as tasks under a batch scheduler, same bytes):
  rowdeck plan INPUT... --out DIR --work WORK --tasks N [shuffle options]
  rowdeck task WORK --stage scatter|deal|gather [--index I]
  rowdeck finish WORK                            join the parts, write the manifest
  rowdeck status WORK                            which tasks are done, failed, to run

Inputs are CSV (RFC 4180), TSV or JSON Lines, optionally gzip-compressed; '-' reads stdin.
The same seed and inputs give the same bytes, whatever the thread count or memory budget.

Run 'rowdeck COMMAND --help' for a command's options and examples.
  -V, --version   print the version
  -h, --help      print this help

Exit status: 0 success, 1 data error (bad input, tolerance not met, verify mismatch), 2 usage error.
`;

export const SHUFFLE_HELP = `rowdeck shuffle — shuffle records reproducibly and deal them into parts

Usage:
  rowdeck shuffle INPUT... --out DIR [options]

What it does:
  Every record gets a random key from the seed; records are sorted by key in two stages
  (scatter into buckets, held in memory or spill files, then gather bucket by bucket on
  worker threads) so inputs larger than memory work. Records are then dealt by rank within their class, so every part keeps each
  class at its overall share (within one record), and each part's records come in a uniformly
  random order (see --order). DIR/manifest.json, written last, records counts, class mix,
  checksums, fingerprints and the seed.

${renderOptionList(SHUFFLE_SPEC)}

Memory and disk:
  The input's size over --memory decides how records wait between the two stages (the
  manifest's run.layout says which ran; progress shows it):
    memory      the spill (about 1.3x the input) fits in 3/4 of the budget: it stays in
                memory (unnamed files in /dev/shm, or shared memory); no spill file
    spill       larger, up to what one level of buckets holds within the budget (each
                bucket small enough for stage 2, each buffer of stage 1 at least 32 KiB):
                what the budget leaves stays in memory as above, the rest goes to spill
                files, read back bucket by bucket and removed as stage 2 passes them
    multi-pass  larger still: as many buckets as 32 KiB buffers fit the budget, and stage 2
                scatters each one too large for it once more, by the key's next bits, before
                it deals it: memory stays within the budget at any input size
  Beside the budget: Node itself and the threads' heaps, about 110-140 MiB on two threads
  (under budgets below 512 MiB the threads' young heaps are kept small to hold that), and
  column statistics (--stats, profile) for wide inputs.
  Before it reads a record, a run checks the free space of the spill's folder and of --out
  against what it will write (spill about 1.3x the input less what stays in memory, parts
  about 1x; on one disk the spill and a range of parts at once) and stops with RDK_NO_SPACE
  if short.

On a terminal, shuffle ends with a table of parts (and folds) by class: each class's records
and how far its share strays from its share in the whole input, the largest marked with *.

Examples:
  rowdeck shuffle readings.csv --out parts --partitions 8 --stratify fault --seed 2026
  rowdeck shuffle readings.csv --out parts --partitions 8 --stratify fault --report
  rowdeck shuffle day-*.csv.gz --out cv --folds 5 --stratify fault,site --group sensor_id
  rowdeck shuffle events.jsonl --out sets --split train=0.8,valid=0.1,test=0.1 --stratify label

Cautions:
  * Time-ordered data: a random shuffle or random folds are wrong for evaluating forecasts;
    the future leaks into training. Split by time instead.
  * Records of one person, device or session spread over folds leak too: use --group.
  * The manifest holds values from the data (class names). Use --exclude-values before you
    publish a manifest of sensitive data.
  * --force is for replacing rowdeck's own output: give every output a folder of its own.

Interrupted (Ctrl-C, SIGTERM, SIGHUP, SIGQUIT), a run removes its work files and says so in one
line; after a SIGKILL the next run removes them. Split names may not be manifest, rejected or
report (rowdeck's own files) or look like a path.
`;

/** SHUFFLE_HELP with this machine's figures filled in (the default budget as it is now). */
export function shuffleHelp(defaultMemory: number): string {
  const mib = defaultMemory / 2 ** 20;
  const shown = mib >= 1024 && mib % 1024 === 0 ? `${mib / 1024}GiB` : `${Math.round(mib)}MiB`;
  return SHUFFLE_HELP.replace('{memory-default}', shown);
}

export const PROFILE_HELP = `rowdeck profile — schema, statistics and class balance of inputs

Usage:
  rowdeck profile INPUT... [--stratify COL[,COL]] [--partitions N] [--folds K] [--json]

Reads the inputs once (streaming, bounded memory, statistics on worker threads) and prints, per
column, the inferred type, count, missing values, distinct values (exact up to 1000, then an
estimate marked ~), min/max, mean and standard deviation of numeric columns, and the most
frequent values; with --stratify, the class balance as a bar chart; then warnings: classes too
small for the partitions or folds you plan (with settings that would work), missing values in
a stratify column, empty columns.

${renderOptionList(PROFILE_SPEC)}
Caution: a profile holds values from the data (min/max, frequent values, class names). Use
--exclude-values before publishing one for sensitive data.

Examples:
  rowdeck profile readings.csv --stratify fault --partitions 8 --folds 5
  rowdeck profile readings.csv --stratify fault --html readings-profile.html
`;

export const VERIFY_HELP = `rowdeck verify — check an output folder against its manifest

Usage:
  rowdeck verify DIR [--against INPUT...] [--temp-dir DIR] [--no-replay] [--memory SIZE] [--threads N] [--json] [--quiet]

Re-reads every output file and checks it against DIR/manifest.json: presence, size, sha256,
record counts, per-class and per-fold counts, the tolerance, the order-independent
fingerprint of the records, and (for a run with --stats) every part's column statistics and the
whole input's, computed again from the parts; a file that looks like a part but is not listed
fails. With --against, also re-reads the inputs and checks that the output holds exactly their
records (nothing lost, duplicated or altered; the fold column aside), and replays the seed: the
shuffle runs again from the manifest's seed and options, writing nothing but its spill, and the
parts must be byte for byte what it gives (an edited seed or option fails).

${renderOptionList(VERIFY_SPEC)}
Exit status 0 when everything holds; otherwise 1 and a list of every mismatch on stderr.

Examples:
  rowdeck verify parts
  rowdeck verify parts --against readings.csv
`;

export const REPORT_HELP = `rowdeck report — the result of a shuffle as a page you can read at a glance

Usage:
  rowdeck report DIR [--verify] [--threads N] [--quiet]

Writes DIR/report.html from DIR/manifest.json and prints its path. The page shows:
  * each part's and each fold's class mix against the whole input (stacked bars), and a grid of
    how far each class's share strays from its overall share (blue below, orange above, the
    largest outlined; the tolerance on the colour scale);
  * part and fold sizes, the splits asked for and what they got, groups, quantile bin edges;
  * with a --stats run, each numeric column's mean and spread in every part against the whole;
  * the seed, the options, the inputs, and the sha256 and fingerprint of every part.
Every chart has a table of the same numbers beside it. Class names are shown as text, never as
markup; a run with --exclude-values shows classes as "class 1", "class 2", ...

The page is one file: styles and charts inline, no script, nothing loaded from the network. It
reads offline and prints (long tables unroll on paper). rowdeck shuffle --report writes the same
page at the end of a run.

${renderOptionList(REPORT_SPEC)}
Exit status: 0 when written (and, with --verify, every check held); 1 when a check failed or
the folder has no readable manifest; 2 on a usage error.

Examples:
  rowdeck report parts
  rowdeck report parts --verify
  rowdeck shuffle readings.csv --out parts --partitions 8 --stratify fault --report
  xdg-open "$(rowdeck report parts)"
`;

export const PLAN_HELP = `rowdeck plan — cut a shuffle into tasks for a batch scheduler (Slurm, Kubernetes, …)

Usage:
  rowdeck plan INPUT... --out DIR --work WORK --tasks N [--gather-tasks M] [shuffle options]

Checks the inputs and options exactly as rowdeck shuffle does (same errors, before any work) and
writes, into WORK (a new folder on a file system every node sees at the same path):
  WORK/plan.json        the plan: inputs (size and time, checked by every task), options, tasks
  WORK/slurm.sh         submits the stages as Slurm array jobs chained by afterok:
                          sh WORK/slurm.sh [sbatch options, e.g. --partition=batch]
  WORK/kubernetes.yaml  one Indexed Job per stage, and the order to apply them in

The stages: N scatter tasks (stage 1 over the inputs: small files whole, large plain files as
byte ranges, a gzip file whole), M gather tasks (stage 2 over ranges of buckets), and finish
(joins the parts, writes the manifest, puts DIR into place). Between the first two, the deal step
(checks the scatter tasks fit together, counts and places groups, the tolerance check) is made by
the last scatter task to end, or else by the first gather tasks: no stage of its own. Tasks share
nothing but WORK; each may be killed and run again, or run twice at once. The output is byte for
byte what rowdeck shuffle gives with the same inputs, seed and options.

Besides every option of rowdeck shuffle but --temp-dir (the spill goes in WORK):

${renderOptionList(PLAN_SPEC, ['Plan'])}
Standard input and pipes are refused: every task must be able to read its inputs from a file.
Quantile bins (COL:bins=Q) are computed here, with one pass over the inputs.

Example:
  rowdeck plan /shared/logs/*.csv --out /shared/parts --work /shared/work-2026 --tasks 100 \\
    --partitions 64 --stratify fault --seed 2026
  sh /shared/work-2026/slurm.sh --partition=batch
`;

export const TASK_HELP = `rowdeck task — run one task of a plan

Usage:
  rowdeck task WORK --stage scatter|deal|gather [--index I]

Without --index the task's number comes from the scheduler: SLURM_ARRAY_TASK_ID (Slurm),
JOB_COMPLETION_INDEX (Kubernetes Indexed Jobs), AWS_BATCH_JOB_ARRAY_INDEX (AWS Batch),
PBS_ARRAY_INDEX (PBS), or SGE_TASK_ID (Grid Engine) and LSB_JOBINDEX (LSF), which count from 1.
The deal stage has one task, which the last scatter task to end runs too (and a gather task that
finds no deal); run it alone to see its error again. A task that is already done does nothing;
one killed or run twice at once leaves nothing half-written (it works in a private folder and
moves it into place).

${renderOptionList(TASK_SPEC)}`;

export const FINISH_HELP = `rowdeck finish — join a plan's parts and write the output

Usage:
  rowdeck finish WORK [--keep-work] [--threads N] [--json]

Checks that every task of the plan is done and was written for this plan (naming any missing or
failed one with the command that runs it), removes the scatter tasks' spill unless --keep-work
(no task reads it any more), joins the gather tasks' parts in order (plain parts on worker
threads, side by side), writes the manifest (its run section lists every task's host and
times), puts the output folder into place at once, and removes WORK.

${renderOptionList(FINISH_SPEC)}`;

export const STATUS_HELP = `rowdeck status — a plan's tasks: done, failed, started, not started

Usage:
  rowdeck status WORK [--json]

Reads WORK only. For each stage: how many tasks are done; each task that is not, with its state
(failed, with the error; started: a run in progress, or one killed); and what to run next.

${renderOptionList(STATUS_SPEC)}`;
