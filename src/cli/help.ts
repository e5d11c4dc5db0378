/** Help texts. Kept together so the wording stays consistent across commands. */

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
  --version   print the version
  --help      print this help

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

Dealing:
  --partitions N          number of partition files (default 1)
  --split NAME=W,...      named splits, e.g. train=0.8,valid=0.1,test=0.1; weights may be
                          record counts instead (train=8000,test=2000), one may be * (the rest)
  --folds K               append a fold column (0..K-1), dealt jointly with the partitions
  --fold-column NAME      name of that column (default fold)
  --stratify COL[,COL]    keep the class mix of these columns in every part; a numeric column
                          may be given as COL:bins=Q for Q quantile bins. Missing values form
                          their own class.
  --tolerance X           largest allowed relative deviation of a class's share in any part or
                          fold from its overall share (default 0.5). Checked before anything is
                          written; the achieved value is recorded in the manifest.
  --group COL             keep all records with the same COL value in one part (whole groups are
                          dealt, balancing classes as well as they allow); the groups are held
                          in memory beside --memory while they are placed: ~30 bytes each
  --assign exact|hash     exact quotas (default), or hash: a record's part is a pure function of
                          its --key and the seed, so appended records never move old ones
  --key COL[,COL]         columns that identify a record (required with --assign hash)
  --order random|spread|grouped
                          order of the records inside each part. random (default): every
                          order equally likely, also with --group and --assign hash (a group
                          shares a part, not a place in it). spread: every class spread evenly
                          through the part: after any number t of records each class has
                          within one record of t x its share, so any window of w records holds
                          each class within two of w x its share (needs --stratify; costs one
                          more write and read of the output). grouped: the records of one
                          group or key next to each other, in input order, the groups in
                          random order (needs --group or --assign hash)
  --seed TEXT             any text (default: a fixed seed, printed, so every run is reproducible)

Input:
  --format csv|tsv|jsonl  (default: from the file name: .csv .tsv .jsonl .ndjson, with .gz)
  --delimiter C           one-byte field delimiter (default , or tab for TSV)
  --no-header             the first line is data; columns are named column_1, column_2, ...
  --on-bad-record MODE    fail (default): stop at the first malformed record;
                          skip: count and leave it out; quarantine: also write it, with its
                          line number and reason, to DIR/rejected.csv

Output and resources:
  --out DIR               output folder: new, or empty (then it keeps its mode, group and setgid
                          bit); locked while the run works, so a second run into it fails
  --force                 replace a previous output of rowdeck in DIR: only the files its
                          manifest lists, and only once the new output is complete. Anything
                          else in DIR stops the run (nothing is touched); refused where DIR is
                          /, a mount point, the working or home folder or one above them, or
                          holds an input
  --gzip                  compress parts (.gz)
  --memory SIZE           memory budget, e.g. 64MiB, 2GiB (default: a quarter of the memory
                          available at start, 128MiB to 16GiB; here now: {memory-default}).
                          It decides the layout, never the output (see Memory and disk)
  --threads N             worker threads (default: number of cores; inputs under 32 MiB are
                          shuffled on the main thread, faster than starting threads); 0 keeps
                          all the work on the main thread. The output is the same either way
  --temp-dir DIR          where spill files go (default: beside DIR); they take about 1.3x
                          the input (records plus 24 bytes each: more for short records) and
                          are removed range by range as the parts are written; none where
                          the spill fits in --memory
  --stats                 add per-column statistics of the input and of every part to the
                          manifest (types, missing, min/max/mean/sd, frequent values); this
                          adds 35-70% to the run time. Within --memory: with many parts the
                          parts are read back one at a time for theirs. Each column's table
                          takes up to ~35 KB a thread beside it (2,000 columns: ~70 MB).
                          rowdeck profile gives the input's alone
  --exclude-values        leave data values (class names, frequent values) out of the manifest
  --report                also write DIR/report.html, the manifest as a page of charts and
                          tables (see rowdeck report --help)
  --json                  print the manifest on stdout
  --quiet                 no progress or summary on stderr

Memory and disk:
  The input's size over --memory decides how records wait between the two stages (the
  manifest's run.layout says which ran; progress shows it):
    memory      the spill (about 1.3x the input) fits in 3/4 of the budget: it stays in
                memory (unnamed files in /dev/shm, or shared memory); no spill file
    spill       larger, up to what one level of buckets holds within the budget (each
                bucket small enough for stage 2, each buffer of stage 1 at least 32 KiB):
                spill files, read back bucket by bucket and removed as stage 2 passes them
    multi-pass  larger still: as many buckets as 32 KiB buffers fit the budget, and stage 2
                scatters each one too large for it once more, by the key's next bits, before
                it deals it: memory stays within the budget at any input size
  Before it reads a record, a run checks the free space of the spill's folder and of --out
  against what it will write (spill about 1.3x the input, parts about 1x; on one disk the
  spill and a range of parts at once) and stops with ERR_NO_SPACE if short.

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

Options:
  --stratify COL[,COL]    show the class balance of these columns (the classes a shuffle with
                          the same --stratify deals); COL:bins=Q for Q quantile bins of a
                          numeric column (then the inputs are read twice, as by shuffle)
  --partitions N          warn about classes that N partitions cannot all hold
  --folds K               warn about classes that K folds cannot all hold
  --tolerance X           the tolerance those warnings check against (default 0.5, as shuffle)
  --threads N             worker threads (default: number of cores, or none for inputs under
                          32 MiB); 0 keeps the work on the main thread
  --format, --delimiter, --no-header   as for shuffle
  --on-bad-record MODE    fail (default), or skip: count malformed records, list the first 20
  --exclude-values        leave data values (min/max, frequent values, class names) out
  --html FILE             also write the profile as a page: class balance as bars, missing
                          values per column, every column's summary, the warnings. One file,
                          no scripts, nothing loaded from the network; readable offline
  --json                  print the profile as JSON on stdout
  --quiet                 no progress or notes on stderr

Caution: a profile holds values from the data (min/max, frequent values, class names). Use
--exclude-values before publishing one for sensitive data.

Examples:
  rowdeck profile readings.csv --stratify fault --partitions 8 --folds 5
  rowdeck profile readings.csv --stratify fault --html readings-profile.html
`;

export const VERIFY_HELP = `rowdeck verify — check an output folder against its manifest

Usage:
  rowdeck verify DIR [--against INPUT...] [--temp-dir DIR] [--no-replay] [--threads N] [--json] [--quiet]

Re-reads every output file and checks it against DIR/manifest.json: presence, size, sha256,
record counts, per-class and per-fold counts, the tolerance, the order-independent
fingerprint of the records, and (for a run with --stats) every part's column statistics and the
whole input's, computed again from the parts; a file that looks like a part but is not listed
fails. With --against, also re-reads the inputs and checks that the output holds exactly their
records (nothing lost, duplicated or altered; the fold column aside), and replays the seed: the
shuffle runs again from the manifest's seed and options, writing nothing but its spill, and the
parts must be byte for byte what it gives (an edited seed or option fails).

Options:
  --against INPUT...      the inputs of the run, in the same order (every argument up to the
                          next option); records missing from or extra in the output are listed
                          with their file:line (up to 20 of each, for inputs up to 2 million records)
  --temp-dir DIR          where the replay's spill goes (default: beside the checked folder)
  --no-replay             skip the replay (standard input or a pipe is read once: skipped then)
  --threads N             worker threads that read parts side by side (default: number of cores,
                          for outputs of 32 MiB and more; 1 reads them on the main thread)
  --json                  print the report (every check and mismatch) on stdout
  --quiet                 no progress or summary line on stderr (mismatches are still listed)

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

Options:
  --verify                re-read every part against the manifest first (as rowdeck verify),
                          and show which checks ran on which files and what, if anything,
                          failed; exit 1 when a check fails (the page is written either way)
  --threads N             worker threads for --verify (as for rowdeck verify)
  --quiet                 no progress or summary on stderr (the path still goes to stdout)

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
byte ranges, a gzip file whole), one deal task (checks the scatter tasks fit together, counts and
places groups, the tolerance check), M gather tasks (stage 2 over ranges of buckets), and finish
(joins the parts, writes the manifest, puts DIR into place). Tasks share nothing but WORK; each
may be killed and run again, or run twice at once. The output is byte for byte what
rowdeck shuffle gives with the same inputs, seed and options.

Options (besides every option of rowdeck shuffle but --temp-dir: the spill goes in WORK):
  --work WORK             the work folder (new or empty); it needs about 2.3x the input free
  --tasks N               scatter tasks (fewer when the inputs cannot be cut so: a gzip file is
                          read whole by one task)
  --gather-tasks M        gather tasks (default N; at most the bucket count)
  --threads T             threads of each task (default: this machine's cores); Slurm asks for
                          T CPUs and the memory budget plus 512 MiB a task
  --memory SIZE           each task's budget (default 512MiB: this machine's memory says
                          nothing of the nodes'); the tasks spill to files in WORK, and a
                          gather task splits a bucket too large for it (same bytes)
  --image NAME            the container image of kubernetes.yaml (default node:20-bookworm); it
                          must run this rowdeck at the path the plan names
  --claim NAME            the ReadWriteMany PersistentVolumeClaim holding the inputs, WORK and DIR
                          (default rowdeck-shared)
  --mount-path PATH       where the pods mount it (default /)
  --json                  print the plan on stdout

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
The deal stage has one task. A task that is already done does nothing; one killed or run twice
at once leaves nothing half-written (it works in a private folder and moves it into place).

Options:
  --stage S   scatter, deal or gather
  --index I   the task's number, from 0
  --quiet     no line on stderr when done
`;

export const FINISH_HELP = `rowdeck finish — join a plan's parts and write the output

Usage:
  rowdeck finish WORK [--keep-work] [--json]

Checks that every task of the plan is done and was written for this plan (naming any missing or
failed one with the command that runs it), joins the gather tasks' parts in order, writes the
manifest (its run section lists every task's host and times), puts the output folder into place
at once, and removes WORK.

Options:
  --keep-work   keep WORK afterwards
  --json        print the manifest on stdout
  --quiet       no summary line on stderr
`;

export const STATUS_HELP = `rowdeck status — a plan's tasks: done, failed, started, not started

Usage:
  rowdeck status WORK [--json]

Reads WORK only. For each stage: how many tasks are done; each task that is not, with its state
(failed, with the error; started: a run in progress, or one killed); and what to run next.
`;
