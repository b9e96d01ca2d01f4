"""Test of cyclarc_spark.py against a fake cyclarc, in local Spark on 127.0.0.1.

What it does: writes a small Python stand-in for the cyclarc binary that keeps the plan / run /
commit contract in miniature (5 shards; it records every attempt in a log; environment variables
make chosen shards fail), then runs the driver with `--master local[2,3]` (three attempts per
task) and checks what ran: a shard that fails once with 75 is retried and the job commits; a
shard that exits 2 is not retried and nothing is committed; a shard that keeps exiting 75 stops
the job with 75 after three attempts; a failed plan starts no Spark at all.

What it does not: build or run the real cyclarc, or test a cluster. Skipped when pyspark is not
installed (`pip install pyspark==3.5.3`; Java 17 on PATH). Run: python3 pipelines/spark/test_cyclarc_spark.py
"""

import os, subprocess, sys, tempfile, textwrap, unittest

DRIVER = os.path.join(os.path.dirname(os.path.abspath(__file__)), "cyclarc_spark.py")

try:
    import pyspark  # noqa: F401
    HAVE_PYSPARK = True
except ImportError:
    HAVE_PYSPARK = False

FAKE_CYCLARC = textwrap.dedent('''\
    """A fake cyclarc for the driver's test: plan, run and commit in miniature (5 shards)."""
    import json, os, sys
    state = os.environ["FAKE_STATE"]
    args = sys.argv[1:]
    threads = "-"
    if "--threads" in args:
        k = args.index("--threads"); threads = args[k + 1]; del args[k:k + 2]
    def log(name, line):
        with open(os.path.join(state, name), "a") as f:
            f.write(line + "\\n")
    def shard_env(name):
        return int(os.environ.get(name, "-1"))
    command = args[0]
    if command == "plan":
        job, plan = args[1], args[args.index("--out") + 1]
        log("plans.log", job)
        if os.environ.get("FAKE_PLAN_EXIT"):
            print("fake cyclarc: cannot parse the job file", file=sys.stderr)
            sys.exit(int(os.environ["FAKE_PLAN_EXIT"]))
        with open(plan, "w") as f:
            json.dump({"hash": "0f1e2d3c4b5a6978", "shards": [{"id": i} for i in range(5)]}, f)
        print(json.dumps({"plan": plan, "hash": "0f1e2d3c4b5a6978", "shards": 5,
                          "parts": os.path.join(state, "parts")}))
    elif command == "run":
        plan = args[1]
        i, n = map(int, args[args.index("--shard") + 1].split("/"))
        total = len(json.load(open(plan))["shards"])
        for s in range(i, total, n):
            code = 0
            marker = os.path.join(state, "flaky-%d.failed" % s)
            if s == shard_env("FAKE_FLAKY_SHARD") and not os.path.exists(marker):
                open(marker, "w").close()
                code = 75
            elif s == shard_env("FAKE_STUCK_SHARD"):
                code = 75
            elif s == shard_env("FAKE_BROKEN_SHARD"):
                code = 2
            log("runs.log", "%d %d %s" % (s, code, threads))
            if code:
                print("fake cyclarc: shard %d failed (%d)" % (s, code), file=sys.stderr)
                sys.exit(code)
            os.makedirs(os.path.join(state, "parts"), exist_ok=True)
            open(os.path.join(state, "parts", "part-%d" % s), "w").close()
    elif command == "commit":
        log("commits.log", args[1])
        missing = [s for s in range(5) if not os.path.exists(os.path.join(state, "parts", "part-%d" % s))]
        if missing:
            print("fake cyclarc: missing shards %s" % missing, file=sys.stderr)
            sys.exit(1)
        print("committed")
    else:
        sys.exit(2)
''')


@unittest.skipUnless(HAVE_PYSPARK, "pyspark is not installed (pip install pyspark==3.5.3): "
                                   "the Spark driver test needs it")
class SparkDriverTest(unittest.TestCase):
    def setUp(self):
        self.tmp = tempfile.TemporaryDirectory(prefix="cyclarc-spark-test-")
        self.dir = self.tmp.name
        self.state = os.path.join(self.dir, "state")
        os.mkdir(self.state)
        self.fake = os.path.join(self.dir, "cyclarc")
        with open(self.fake, "w") as f:
            f.write(f"#!{sys.executable}\n" + FAKE_CYCLARC)
        os.chmod(self.fake, 0o755)
        self.job = os.path.join(self.dir, "fennick-hollow.toml")
        with open(self.job, "w") as f:
            f.write('# Fennick Hollow pump station (invented): fh.p1.de.accel and friends\n')

    def tearDown(self):
        self.tmp.cleanup()

    def drive(self, **fake_env):
        env = dict(os.environ, FAKE_STATE=self.state, SPARK_LOCAL_IP="127.0.0.1",
                   PYSPARK_PYTHON=sys.executable,
                   PYSPARK_SUBMIT_ARGS="--conf spark.ui.enabled=false --conf spark.driver.host=127.0.0.1 "
                                       "--conf spark.driver.bindAddress=127.0.0.1 pyspark-shell",
                   **fake_env)
        env.pop("CYCLARC_BIN", None)
        proc = subprocess.run([sys.executable, DRIVER, self.job, "--plan", os.path.join(self.dir, "plan.json"),
                               "--cyclarc", self.fake, "--master", "local[2,3]"],
                              env=env, capture_output=True, text=True, timeout=300)
        self.stderr = proc.stderr
        return proc.returncode

    def lines(self, name):
        path = os.path.join(self.state, name)
        if not os.path.exists(path):
            return []
        with open(path) as f:
            return f.read().splitlines()

    def attempts(self):
        """{shard: [exit codes of its attempts, in order]}"""
        out = {}
        for line in self.lines("runs.log"):
            shard, code, _ = line.split()
            out.setdefault(int(shard), []).append(int(code))
        return out

    def test_a_temporary_failure_is_retried_and_the_job_commits(self):
        code = self.drive(FAKE_FLAKY_SHARD="3")
        self.assertEqual(code, 0, self.stderr)
        self.assertEqual(self.attempts(), {0: [0], 1: [0], 2: [0], 3: [75, 0], 4: [0]}, self.stderr)
        self.assertEqual(len(self.lines("commits.log")), 1)
        self.assertEqual(len(self.lines("plans.log")), 1)
        self.assertEqual({line.split()[2] for line in self.lines("runs.log")}, {"1"})  # --threads 1
        self.assertIn("cyclarc-spark: run: 5/5 shards done", self.stderr)
        self.assertIn("retried shards [3]", self.stderr)
        self.assertIn("cyclarc-spark: commit: cyclarc exit 0", self.stderr)

    def test_a_permanent_failure_is_not_retried_and_nothing_is_committed(self):
        code = self.drive(FAKE_BROKEN_SHARD="1")
        self.assertEqual(code, 2, self.stderr)
        self.assertEqual(self.attempts(), {0: [0], 1: [2], 2: [0], 3: [0], 4: [0]}, self.stderr)
        self.assertEqual(self.lines("commits.log"), [])
        self.assertIn("shard 1 failed permanently, cyclarc exit 2", self.stderr)

    def test_a_shard_that_keeps_failing_stops_the_job_with_its_code(self):
        code = self.drive(FAKE_STUCK_SHARD="2")
        self.assertEqual(code, 75, self.stderr)
        self.assertEqual(self.attempts()[2], [75, 75, 75], self.stderr)  # local[2,3]: three attempts
        self.assertEqual(self.lines("commits.log"), [])
        self.assertIn("cyclarc exit 75 (retryable)", self.stderr)

    def test_a_failed_plan_stops_before_spark(self):
        code = self.drive(FAKE_PLAN_EXIT="2")
        self.assertEqual(code, 2, self.stderr)
        self.assertEqual(self.lines("runs.log") + self.lines("commits.log"), [])
        self.assertIn("plan: cyclarc exit 2; stopping", self.stderr)


if __name__ == "__main__":
    unittest.main(verbosity=2)
