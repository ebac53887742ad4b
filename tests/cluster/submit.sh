#!/bin/sh
# A stand-in for a batch system's submit command (sbatch, qsub), for
# snakemake-executor-plugin-cluster-generic: it is called with the job script as its
# last argument and must print a job id and return at once. The job runs detached in
# the background (no terminal, output to a log beside the script); without the
# redirections the executor waits for the job's output and runs one job at a time.
# No status command is given: the executor then watches the job script's own
# finished/failed marker files in the working folder's .snakemake/.
for script; do :; done
sh "$script" > "$script.log" 2>&1 < /dev/null &
echo "local-$!"
