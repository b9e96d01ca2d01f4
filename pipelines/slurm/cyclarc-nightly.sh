#!/usr/bin/env bash
# Submit a cyclarc night to Slurm: a plan job, an array of 16 shard jobs after it, and a commit
# job after the array.
#
# What it does: submits three jobs with `sbatch --parsable` and prints their ids:
#   plan    cyclarc plan JOB.toml --out PLAN
#   run     array 0-15, after the plan succeeded: cyclarc run PLAN --shard $SLURM_ARRAY_TASK_ID/16
#           (shards I, I+16, I+32, ... of the plan, whatever their number)
#   commit  after the array ended, however it ended: cyclarc commit PLAN; it exits 1 naming
#           the missing shards when some did not finish, so the night shows as FAILED (and
#           mails, with CYCLARC_MAIL set).
# Retries: a shard whose cyclarc exits 75 (temporary: throttling, timeouts) or 3 (writing
# failed) is run again in the same job, up to 3 attempts with a pause between; `--requeue`
# puts a shard back in the queue when its node fails or it is preempted. Exit 2 (bad input)
# and 1 (bound broken, archive damaged) are permanent and not retried. If the plan job fails,
# the array is cancelled (--kill-on-invalid-dep) and the commit then fails, naming the night.
#
# What it does not: wait for the jobs, install cyclarc, or put credentials on a command line.
# The jobs read the object store's variables (AWS_ACCESS_KEY_ID, AWS_SECRET_ACCESS_KEY,
# AWS_REGION, ...) from the file CYCLARC_ENV_FILE (default ~/.config/cyclarc/object-store.env,
# KEY=value lines; keep it mode 600), read when each job starts.
#
# Usage: pipelines/slurm/cyclarc-nightly.sh [JOB.toml]      (default /etc/cyclarc/nightly.toml)
# Settings from the environment, with their defaults:
#   CYCLARC_NIGHT=$(date -u +%F)   CYCLARC_PLAN=s3://fennick-hollow-archive/plans/nightly-NIGHT.json
#   CYCLARC_BIN=cyclarc   CYCLARC_THREADS=4 (per shard, = --cpus-per-task)   CYCLARC_MAIL=(none)
#   CYCLARC_LOGS=~/cyclarc-logs   and sbatch's own SBATCH_PARTITION, SBATCH_ACCOUNT, ...
# From cron, at 01:30 every night:   30 1 * * *  /opt/cyclarc/pipelines/slurm/cyclarc-nightly.sh
set -euo pipefail

export CYCLARC_JOB_FILE=${1:-/etc/cyclarc/nightly.toml}
export CYCLARC_SHARDS=16
night=${CYCLARC_NIGHT:-$(date -u +%F)}   # fixed once here, so all three jobs use the same plan
export CYCLARC_PLAN=${CYCLARC_PLAN:-s3://fennick-hollow-archive/plans/nightly-$night.json}
export CYCLARC_BIN=${CYCLARC_BIN:-cyclarc}
export CYCLARC_THREADS=${CYCLARC_THREADS:-4}
export CYCLARC_ENV_FILE=${CYCLARC_ENV_FILE:-$HOME/.config/cyclarc/object-store.env}
logs=${CYCLARC_LOGS:-$HOME/cyclarc-logs}
mkdir -p "$logs"

common=(--parsable --export=ALL --requeue)
if [ -n "${CYCLARC_MAIL:-}" ]; then
  common+=(--mail-type=FAIL "--mail-user=$CYCLARC_MAIL")
fi
job_id() { echo "${1%%;*}"; }   # --parsable prints "id" or "id;cluster"

# Each job script starts by reading the credentials file (quoted here-docs: nothing in them
# is expanded at submission; they read the CYCLARC_* variables exported above).
plan_id=$(job_id "$(sbatch "${common[@]}" --job-name=cyclarc-plan --cpus-per-task=1 --mem=2G \
  --time=00:30:00 --output="$logs/%x-%j.out" <<'EOF'
#!/bin/bash
set -euo pipefail
if [ -r "$CYCLARC_ENV_FILE" ]; then set -a; . "$CYCLARC_ENV_FILE"; set +a; fi
echo "cyclarc-nightly: plan $CYCLARC_PLAN from $CYCLARC_JOB_FILE" >&2
exec "$CYCLARC_BIN" plan "$CYCLARC_JOB_FILE" --out "$CYCLARC_PLAN"
EOF
)")

run_id=$(job_id "$(sbatch "${common[@]}" --job-name=cyclarc-run --array="0-$((CYCLARC_SHARDS - 1))" \
  --dependency="afterok:$plan_id" --kill-on-invalid-dep=yes \
  --cpus-per-task="$CYCLARC_THREADS" --mem=8G --time=03:00:00 --output="$logs/%x-%A_%a.out" <<'EOF'
#!/bin/bash
set -uo pipefail
if [ -r "$CYCLARC_ENV_FILE" ]; then set -a; . "$CYCLARC_ENV_FILE"; set +a; fi
shard="$SLURM_ARRAY_TASK_ID/$CYCLARC_SHARDS"
for attempt in 1 2 3; do
  echo "cyclarc-nightly: shard $shard of $CYCLARC_PLAN, attempt $attempt" >&2
  "$CYCLARC_BIN" --threads "$CYCLARC_THREADS" run "$CYCLARC_PLAN" --shard "$shard"
  rc=$?
  case $rc in
    75 | 3) echo "cyclarc-nightly: shard $shard: exit $rc, temporary" >&2 ;;
    *) exit "$rc" ;;   # 0 done; 2, 1 permanent; 4 interrupted (Slurm requeues on preemption)
  esac
  if [ "$attempt" -lt 3 ]; then sleep $((60 * attempt)); fi
done
exit "$rc"
EOF
)")

commit_id=$(job_id "$(sbatch "${common[@]}" --job-name=cyclarc-commit --dependency="afterany:$run_id" \
  --cpus-per-task=1 --mem=1G --time=00:30:00 --output="$logs/%x-%j.out" <<'EOF'
#!/bin/bash
set -euo pipefail
if [ -r "$CYCLARC_ENV_FILE" ]; then set -a; . "$CYCLARC_ENV_FILE"; set +a; fi
echo "cyclarc-nightly: commit $CYCLARC_PLAN" >&2
exec "$CYCLARC_BIN" commit "$CYCLARC_PLAN"
EOF
)")

echo "cyclarc-nightly: plan $CYCLARC_PLAN: plan job $plan_id, run array $run_id, commit job $commit_id" >&2
