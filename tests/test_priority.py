"""The dashboard lowers its own priority (os.nice / SCHED_IDLE as documented in the Python library)."""
import os
import subprocess
import sys

import pytest

CODE = "import os, tui; b = os.nice(0); tui.lower_priority(); print(b, os.nice(0), os.sched_getscheduler(0))"


def run(env):
    out = subprocess.run([sys.executable, "-c", CODE], env={**os.environ, **env}, capture_output=True,
                         text=True, check=True).stdout.split()
    return [int(x) for x in out]


def test_niceness_raised_by_the_setting():
    before, after, _ = run({"BAGGR_DASHBOARD_NICE": "3"})
    assert after == min(19, before + 3)
    before, after, _ = run({"BAGGR_DASHBOARD_NICE": "0"})
    assert after == before
    before, after, _ = run({"BAGGR_DASHBOARD_NICE": "junk"})     # a bad value: the default
    assert after == min(19, before + 10)


@pytest.mark.skipif(not hasattr(os, "SCHED_IDLE"), reason="no idle scheduling here")
def test_idle_scheduling_on_request():
    _, _, policy = run({"BAGGR_DASHBOARD_SCHED": "idle"})
    assert policy == os.SCHED_IDLE
