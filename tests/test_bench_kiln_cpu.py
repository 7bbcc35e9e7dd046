"""The kiln benchmark's CPU seconds count the workers' CPU time.

Reference: a child process's own ``time.process_time()`` (which it reports), against what
:func:`workbench.benchmarks.kiln._with_cpu` reads for it from ``/proc``; no timing is
asserted, only that the two accounts of the same work agree.
"""

from __future__ import annotations

import subprocess
import sys

import pytest

from workbench.benchmarks import kiln

CHILD = r"""
import sys, time
t = time.process_time()
x = 0
while time.process_time() - t < 0.3:
    x += 1
print(time.process_time(), flush=True)
sys.stdin.readline()  # stays alive until the parent has read its CPU time
"""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
def test_with_cpu_counts_a_living_workers_cpu_time():
    child = subprocess.Popen([sys.executable, "-c", CHILD], stdin=subprocess.PIPE,
                             stdout=subprocess.PIPE, text=True)
    try:
        reported, cpu = kiln._with_cpu(lambda: float(child.stdout.readline()))
    finally:
        child.stdin.close()
        child.wait(timeout=30)
    # the child's whole CPU time (its start-up included) is counted, at /proc's 10 ms tick
    assert cpu >= reported - 0.02
    assert cpu < reported + 2.0  # start-up and this process's own share, not more
