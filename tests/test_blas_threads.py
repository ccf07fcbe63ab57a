"""No BLAS thread pool is woken by a run: per-thread CPU time from /proc.

How it is measured: a fresh interpreter without any *_NUM_THREADS setting loads
numpy, whose BLAS (OpenBLAS on these machines) starts its worker threads then.
Those threads exist before any run; simwave's own read-ahead and write-behind
threads start and end inside each run, so they are not in the "before" snapshot.
The CPU time the pre-existing threads other than the main one spend during the
runs (fields utime and stime of /proc/self/task/TID/stat, proc(5)) is BLAS work.
A woken OpenBLAS pool spins for a while after each call, so one wake-up alone
shows as tens of milliseconds; the old frequency-response product and rate
search showed 300-400 ms over 20 short runs.
"""

import json
import os
import subprocess
import sys

import pytest

import simwave

pytestmark = pytest.mark.skipif(not os.path.isdir("/proc/self/task"),
                                reason="needs Linux /proc for per-thread CPU times")

PROBE = r"""
import json, sys, warnings
import numpy as np
import soundfile as sf
import simwave
from simwave.run import RunJob, execute
from simwave.threads import helper_thread_cpu, thread_cpu_seconds

warnings.simplefilter("ignore")
folder = sys.argv[1]
x = np.zeros((2400, 2))
x[600:1800] = 0.5
sf.write(f"{folder}/in.wav", x, 48000, subtype="FLOAT")
systems = ["(2*pi*1k)^2/(s^2+1.414*2*pi*1k*s+(2*pi*1k)^2)",
           "(2*pi*200)^4/((s^2+0.7654*2*pi*200*s+(2*pi*200)^2)"
           "*(s^2+1.8478*2*pi*200*s+(2*pi*200)^2))"]
jobs = [RunJob(system=s, source=f"{folder}/in.wav", output=f"{folder}/o{i}{m[0]}.wav",
               method=m, metrics=f"{folder}/o{i}{m[0]}.json", initial=init)
        for i, s in enumerate(systems)
        for m, init in (("ramp-invariant", "rest"), ("bilinear", "settled"),
                        ("step-invariant", "rest"))]
execute(jobs[0])  # imports and first-use work
# OpenBLAS's threads spin for a while after numpy starts them (and after any call) before
# they sleep: with simwave's bytecode cached, the imports are quick enough that the
# snapshot below fell inside that spin and counted it (0.01-0.04 s, a failure in about
# half the runs). Wait until they are quiet; a wake-up during the runs spins them again.
import time
quiet = thread_cpu_seconds()
for _ in range(50):
    time.sleep(0.1)
    now = thread_cpu_seconds()
    if helper_thread_cpu(quiet, now) == 0:
        break
    quiet = now
before = thread_cpu_seconds()
for _ in range(2):
    for job in jobs:
        execute(job)
        model = simwave.System.parse(job.system).discretize(48000.0, job.method)
        model.accuracy()
        simwave.simulate(job.system, simwave.Waveform(x, 48000.0), method=job.method)
after = thread_cpu_seconds()
print(json.dumps({"threads": len(before), "helper_cpu_s": helper_thread_cpu(before, after)}))
"""


def test_runs_leave_the_blas_pool_asleep(tmp_path):
    env = {k: v for k, v in os.environ.items()
           if not k.endswith("_NUM_THREADS") and k != "VECLIB_MAXIMUM_THREADS"}
    env["PYTHONPATH"] = os.path.dirname(os.path.dirname(simwave.__file__))
    done = subprocess.run([sys.executable, "-c", PROBE, str(tmp_path)], env=env,
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    result = json.loads(done.stdout.strip().splitlines()[-1])
    if result["threads"] < 2:
        pytest.skip("this numpy's BLAS starts no worker threads: nothing to wake")
    # one clock tick (10 ms on Linux) of slack for a stray scheduler tick
    assert result["helper_cpu_s"] <= 0.01, result
