"""Synthetic journals for the dashboard's tests and benchmark: a made-up job whose figures settle."""
from __future__ import annotations

import math
import os
import random
import time
from pathlib import Path

from baggr.oob.intervals import wilson
from baggr.runs.journal import JOURNAL, JournalWriter

CLASSES = ("calm", "drift", "burst")
CLASS_ROWS = (700, 220, 80)


def start_fields(*, members_target: int, task: str = "classes", classes=CLASSES, class_rows=CLASS_ROWS,
                 pid: int | None = None, pid_started: float | None = None, first_member: int = 0,
                 rows: int | None = None) -> dict:
    """Fields of a start line (the current process by default)."""
    if pid is None:
        import psutil
        pid = os.getpid()
        pid_started = psutil.Process(pid).create_time()
    if task == "regression":
        classes, class_rows = (), ()
    rows = rows if rows is not None else (sum(class_rows) if class_rows else 1000)
    d = {"pid": pid, "pid_started": pid_started, "host": os.uname().nodename, "threads": 2,
         "task": task, "classes": list(classes), "class_rows": list(class_rows), "rows": rows,
         "features": 12, "members_target": members_target, "first_member": first_member,
         "config": {"members": members_target, "seed": 7}, "version": "0.1.0"}
    if first_member:
        d["resumed"] = True
    return d


def member_fields(m: int, *, task: str = "classes", class_rows=CLASS_ROWS, rng: random.Random | None = None,
                  rows: int = 1000) -> dict:
    """Fields of the member line after m members: errors fall like 1/sqrt(m) towards a floor."""
    rng = rng or random.Random(m)
    coverage = 1.0 - math.exp(-0.368 * m) if m < 40 else 1.0   # share of rows left out at least once
    if task == "regression":
        mse = 2.0 + 6.0 / math.sqrt(m) + rng.uniform(-0.05, 0.05)
        half = 1.96 * mse * math.sqrt(2.0 / rows)
        return {"member": m, "elapsed": round(0.2 * m, 4), "error": mse, "interval": [mse - half, mse + half],
                "class_error": [], "coverage": coverage, "oob_rows": int(0.368 * rows), "r2": 1.0 - mse / 10.0,
                "rate": 5.0}
    k = len(class_rows)
    floors = [0.04 + 0.25 * i for i in range(k)]
    conf = []
    for i, r in enumerate(class_rows):
        covered = int(round(r * coverage))
        p = min(0.95, floors[i] + 0.4 / math.sqrt(m) + rng.uniform(-0.01, 0.01))
        wrong = int(round(p * covered))
        row = [0] * k
        row[i] = covered - wrong
        for j in range(wrong):                       # spread the errors over the other classes
            row[(i + 1 + j % (k - 1)) % k] += 1
        conf.append(row)
    covered = [sum(r) for r in conf]
    wrong = [c - conf[i][i] for i, c in enumerate(covered)]
    n, e = sum(covered), sum(wrong)
    return {"member": m, "elapsed": round(0.2 * m, 4),
            "error": e / n if n else None, "interval": list(wilson(e, n)) if n else None,
            "class_error": [w / c if c else None for w, c in zip(wrong, covered)],
            "coverage": coverage, "oob_rows": int(0.368 * sum(class_rows)), "confusion": conf, "rate": 5.0}


def write_journal(run_dir, members: int, *, members_target: int | None = None, task: str = "classes",
                  end: str | None = None, pid: int | None = None, pid_started: float | None = None,
                  t0: float | None = None, classes=CLASSES, class_rows=CLASS_ROWS, checkpoint_every: int = 50,
                  rate: float | None = None) -> Path:
    """A journal with a start line, `members` member lines (a checkpoint line every `checkpoint_every`)
    and (when `end` is given) an end line. rate: members a second said by the member lines (default 5)."""
    run_dir = Path(run_dir)
    run_dir.mkdir(parents=True, exist_ok=True)
    path = run_dir / JOURNAL
    t = [time.time() - 0.2 * members if t0 is None else t0]

    def clock():
        t[0] += 0.2
        return t[0]

    target = members_target or members
    rng = random.Random(1)
    with JournalWriter(path, get_time=clock) as w:
        w.write("start", **start_fields(members_target=target, task=task, classes=classes,
                                        class_rows=class_rows, pid=pid, pid_started=pid_started))
        rows = sum(class_rows) if task == "classes" else 1000
        for m in range(1, members + 1):
            fields = member_fields(m, task=task, class_rows=class_rows, rng=rng, rows=rows)
            if rate is not None:
                fields["rate"] = rate
            w.write("member", **fields)
            if m % checkpoint_every == 0:
                w.write("checkpoint", member=m)
        if end:
            reason = {"finished": f"reached {members} members", "stopped": "stop requested"}.get(end, "error: boom")
            w.write("end", status=end, reason=reason, member=members, elapsed=0.2 * members)
    return path


def dead_pid() -> tuple[int, float]:
    """The pid and start time of a process that has certainly ended (spawned, waited for)."""
    import subprocess
    import sys
    import psutil
    # It waits on its stdin, so it is surely alive while its start time is read.
    p = subprocess.Popen([sys.executable, "-c", "import sys; sys.stdin.read()"], stdin=subprocess.PIPE)
    started = psutil.Process(p.pid).create_time()
    p.stdin.close()
    p.wait()
    return p.pid, started
