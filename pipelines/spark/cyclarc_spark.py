"""Run a cyclarc job on Apache Spark: plan on the driver, one shard per task, commit on the driver.

What it does: (1) `cyclarc plan JOB.toml --out PLAN --json` on the driver, reading the shard count
N from its stdout; (2) N Spark tasks, task i running `cyclarc --threads K run PLAN --shard i/N`
as a subprocess; (3) `cyclarc commit PLAN` on the driver. The script exits with commit's code,
or with the code of the step that stopped it. One summary line per step goes to stderr.

What it does not: read or write any data itself (cyclarc does all the work; Spark only schedules
and retries), copy the cyclarc binary or credentials to the workers, or run under Spark Connect
(it needs the RDD API of classic PySpark 3.5 or 4.x).

Retries: a task whose cyclarc exits with a temporary code (75, 3, 4, or any code cyclarc does
not document, such as a crash) raises, and Spark runs it again up to `spark.task.maxFailures`
attempts in all (default 4 on a cluster; in local mode only with the `local[N,F]` master form,
e.g. `local[2,3]`). A shard is safe to run twice: a part that exists and verifies is a no-op.
A permanent code (2 bad input, 1 bound broken or archive damaged) is not retried: the task
reports it, the other shards finish, and the script exits with that code without committing.

On a cluster (the binary must be at the same path on every worker, PLAN must be a URL or a
shared path, and credentials must reach the executors, e.g. through the cluster's secrets or
`--conf spark.executorEnv.AWS_REGION=...`):
    spark-submit --master yarn --conf spark.task.maxFailures=4 --conf spark.task.cpus=4 \
        pipelines/spark/cyclarc_spark.py /etc/cyclarc/nightly.toml \
        --plan s3://fennick-hollow-archive/plans/nightly-2025-06-01.json \
        --cyclarc /opt/cyclarc/bin/cyclarc --threads-per-task 4
On a laptop (everything on 127.0.0.1; two task slots, three attempts per task):
    SPARK_LOCAL_IP=127.0.0.1 spark-submit --master 'local[2,3]' pipelines/spark/cyclarc_spark.py \
        pipelines/demo.toml --plan target/spark-plan.json --cyclarc target/release/cyclarc
or the same with `python3 pipelines/spark/cyclarc_spark.py ... --master 'local[2,3]'`.
Keep `spark.speculation` off: it would run the same shard twice at once for no gain.
"""

import argparse, ctypes, json, os, re, shutil, signal, subprocess, sys, time

RETRYABLE, PERMANENT = {75, 3, 4}, {1, 2}


def say(msg):
    print(f"cyclarc-spark: {msg}", file=sys.stderr, flush=True)


def tail(text, lines=8):
    return "\n".join(text.strip().splitlines()[-lines:])


def _die_with_parent():
    """A pre-exec hook (Linux) asking for SIGTERM when the task's worker dies, so a cyclarc
    whose Spark task was killed stops (exit 4) instead of running on as an orphan."""
    try:
        prctl = ctypes.CDLL(None, use_errno=True).prctl  # looked up here, not in the child
    except (OSError, AttributeError):
        return None
    return lambda: prctl(1, signal.SIGTERM)  # 1 = PR_SET_PDEATHSIG


def run_cyclarc(argv):
    """Run cyclarc; its stdout passes through, its stderr is echoed and returned."""
    hook = _die_with_parent() if sys.platform.startswith("linux") else None
    proc = subprocess.run(argv, stderr=subprocess.PIPE, text=True, preexec_fn=hook)
    sys.stderr.write(proc.stderr)
    return proc.returncode, proc.stderr


def make_task(binary, plan, n, threads):
    """The function each Spark task runs, for shard i of n."""
    def task(i):
        from pyspark import TaskContext
        ctx = TaskContext.get()
        attempt = ctx.attemptNumber() if ctx else 0
        started = time.monotonic()
        code, err = run_cyclarc([binary, "--threads", str(threads), "run", plan, "--shard", f"{i}/{n}"])
        seconds = round(time.monotonic() - started, 3)
        if code != 0 and code not in PERMANENT:
            kind = "retryable" if code in RETRYABLE else "unexpected, retried"
            raise RuntimeError(f"shard {i}/{n} attempt {attempt}: cyclarc exit {code} ({kind})\n"
                               f"last lines of stderr:\n{tail(err)}")
        return i, seconds, code, attempt, tail(err, 3) if code else ""
    return task


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("job", help="the cyclarc job file (JOB.toml)")
    ap.add_argument("--plan", required=True, help="where the plan goes: a path or s3:// gs:// az:// file:// URL")
    ap.add_argument("--cyclarc", help="the cyclarc binary (default: $CYCLARC_BIN, else cyclarc on PATH)")
    ap.add_argument("--threads-per-task", type=int, help="cyclarc --threads per task (default: spark.task.cpus)")
    ap.add_argument("--master", help="Spark master (default: whatever spark-submit set, else local[*])")
    args = ap.parse_args(argv)

    binary = args.cyclarc or os.environ.get("CYCLARC_BIN") or "cyclarc"
    if os.sep in binary:
        binary = os.path.abspath(binary)  # tasks may start in another folder
    elif shutil.which(binary) is None:
        say(f"cannot find {binary!r} on PATH (give --cyclarc or set CYCLARC_BIN)")
        return 2
    plan = args.plan if "://" in args.plan else os.path.abspath(args.plan)

    # (a) Plan, on the driver, before Spark starts: a bad job file costs no cluster time.
    started = time.monotonic()
    proc = subprocess.run([binary, "plan", args.job, "--out", plan, "--json"],
                          stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    sys.stderr.write(proc.stderr)
    if proc.returncode != 0:
        say(f"plan: cyclarc exit {proc.returncode}; stopping")
        return proc.returncode
    try:
        planned = json.loads(proc.stdout)
        n = int(planned["shards"])
    except (ValueError, KeyError, TypeError) as e:
        say(f"plan: cannot read the shard count from cyclarc's output ({e}): {proc.stdout[:200]!r}")
        return 1
    say(f"plan: {n} shards, hash {planned.get('hash')}, parts {planned.get('parts')} "
        f"({time.monotonic() - started:.1f} s)")

    # (b) Run: one task per shard.
    from pyspark.sql import SparkSession
    builder = SparkSession.builder.appName(f"cyclarc {os.path.basename(args.job)}")
    if args.master:
        builder = builder.master(args.master)
    if args.threads_per_task:
        builder = builder.config("spark.task.cpus", str(args.threads_per_task))
    spark = builder.getOrCreate()
    try:
        sc = spark.sparkContext
        sc.setLogLevel("WARN")
        threads = args.threads_per_task or int(sc.getConf().get("spark.task.cpus", "1"))
        started = time.monotonic()
        try:
            results = sc.parallelize(range(n), max(n, 1)).map(make_task(binary, plan, n, threads)).collect()
        except Exception as e:  # Spark gave up on a shard after its retries
            found = re.findall(r"cyclarc exit (-?\d+)", str(e))
            code = int(found[-1]) if found and int(found[-1]) > 0 else 1
            say(f"run: stopped after {time.monotonic() - started:.1f} s; a shard kept failing "
                f"(last cyclarc exit {found[-1] if found else '?'}); not committing")
            return code
    finally:
        spark.stop()
    failed = [r for r in results if r[2] != 0]
    retried = sorted(r[0] for r in results if r[3] > 0)
    slowest = max(results, key=lambda r: r[1], default=None)
    say(f"run: {n - len(failed)}/{n} shards done in {time.monotonic() - started:.1f} s"
        + (f", slowest shard {slowest[0]} {slowest[1]:.1f} s" if slowest else "")
        + (f", retried shards {retried}" if retried else ""))
    for i, _, code, _, err in failed:
        say(f"run: shard {i} failed permanently, cyclarc exit {code}: {err}")
    if failed:
        say("run: not committing")
        return max(r[2] for r in failed)

    # (c) Commit, on the driver.
    started = time.monotonic()
    code, _ = run_cyclarc([binary, "commit", plan])
    say(f"commit: cyclarc exit {code} ({time.monotonic() - started:.1f} s)")
    return code


if __name__ == "__main__":
    sys.exit(main())
