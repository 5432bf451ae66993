"""Members grown on a Dask cluster give the same run, bit for bit, as local threads.

One process cluster of 2 workers (`local:2`, started through the backend itself) serves the module.
The workers are spawned processes that import baggr from this checkout (PYTHONPATH is inherited).
Members are pure functions of (seed, m) and tallies add (DESIGN.md "Invariants"), so every result
here is compared for exact equality with a run on local threads.
"""
import json
import os
import signal
import subprocess
import sys
import time

import numpy as np
import psutil
import pyarrow as pa
import pyarrow.csv as pacsv
import pytest

pytest.importorskip("distributed", reason="the cluster extra is not installed: pip install -e '.[cluster]'")

import baggr  # noqa: E402
from baggr.backends.dask import Dask, parse_address  # noqa: E402
from baggr.config import Config  # noqa: E402
from baggr.engine import Training  # noqa: E402
from baggr.errors import ClusterError  # noqa: E402
from baggr.cli import report  # noqa: E402
from model_files import read_joined  # noqa: E402
from baggr.runs import MODEL, journal  # noqa: E402
from generators import friedman1, noisy_halves, twonorm  # noqa: E402


@pytest.fixture(scope="module")
def cluster():
    with Dask("local:2", timeout=60) as backend:
        yield backend
    # distributed keeps one thread of its own for the rest of the process ("Dask-Offload"); later tests
    # that fork need a process without threads: a fresh executor starts its thread only when used
    from concurrent.futures import ThreadPoolExecutor

    import distributed.utils
    old = distributed.utils._offload_executor
    distributed.utils._offload_executor = ThreadPoolExecutor(max_workers=1, thread_name_prefix="Dask-Offload")
    old.shutdown(wait=True)


def assert_same(a, b):
    """Every OOB array (curves, tallies, confusion) and every node array of the kept trees."""
    for k, v in a.oob.arrays().items():
        np.testing.assert_array_equal(v, b.oob.arrays()[k], err_msg=k)
    assert (a.forest is None) == (b.forest is None)
    if a.forest is not None:
        for k, v in a.forest.arrays.items():
            np.testing.assert_array_equal(v, b.forest.arrays[k], err_msg=k)


def labelled(n, seed):
    """twonorm (Breiman 1996) with text class labels, so the labels never reach the workers."""
    X, y = twonorm(n, seed=seed)
    return X, np.where(y == 1, "high", "low")


# ---------------------------------------------------------------- same results as threads

@pytest.mark.parametrize("settings", [dict(), dict(draw="balanced", vote="shares", keep_members=False),
                                      dict(importance=True, measure="auc", keep_members=False)],
                         ids=["kept", "balanced-estimate-only", "importance"])
def test_classes_same_as_threads(cluster, settings):
    X, y = labelled(3000, seed=2)
    cfg = Config(members=24, seed=5, threads=2, features_per_split=4, **settings)
    assert_same(Training(X, y, cfg).run(), Training(X, y, cfg).run(backend=cluster))
    assert cluster.stats.members == 24 and sum(cluster.stats.sizes) == 24


def test_train_with_a_client(cluster):
    """baggr.train(..., cluster=client): the caller's client, left open afterwards."""
    X, y = labelled(1000, seed=7)
    cfg = Config(members=10, seed=3, threads=2)
    assert_same(baggr.train(X, y, cfg), baggr.train(X, y, cfg, cluster=cluster.client))
    assert cluster.client.status == "running"


def test_regression_same_as_threads(cluster):
    X, y = friedman1(2000, seed=4)   # Friedman (1991) #1
    cfg = Config(members=16, seed=9, threads=2, min_leaf=3)
    a = Training(X, y, cfg).run()
    b = Training(X, y, cfg).run(backend=cluster)
    assert_same(a, b)


def test_resumed_on_the_cluster_from_a_local_checkpoint(cluster):
    """Members 0..9 on threads, a checkpoint, members 10..29 on the cluster: the same as 0..29 on threads."""
    X, y = twonorm(1500, seed=8)
    cfg = Config(members=30, seed=1, threads=2)
    whole = Training(X, y, cfg).run()
    first = Training(X, y, cfg)
    first.run(until=10)
    arrays, header = first.checkpoint()
    later = Training(X, y, cfg)
    later.restore(arrays, header, first.kept())
    assert_same(whole, later.run(backend=cluster))


def test_chunks_grow_when_members_are_quick(cluster):
    """Members of a few ms cost less than the scheduler's cost per task, so chunks hold several."""
    X, y = twonorm(400, seed=3)
    cfg = Config(members=200, seed=2, threads=2)
    b = Training(X, y, cfg).run(backend=cluster)
    st = cluster.stats
    # the chunks are contiguous and cover every member once (common practice, no source)
    assert sum(st.sizes) == 200 == st.members and st.chunks == len(st.sizes)
    assert max(st.sizes) > 1
    assert_same(Training(X, y, cfg).run(), b)


# ---------------------------------------------------------------- faults

def test_workers_killed_mid_run_change_nothing(cluster):
    """One worker killed at member 8; at member 24 every worker, and with them every copy of the table:
    the lost chunks are grown again (the table shipped again to the workers the nannies start)."""
    X, y = twonorm(8000, seed=6)
    # 120 members: when every worker dies at member 24 the workers are still busy with the chunks after
    # it (the driver folds faster than two workers grow), so some are lost and grown again
    cfg = Config(members=120, seed=4, threads=2, features_per_split=4)
    first = set(cluster.client.run(os.getpid).values())
    killed, notes = {}, []

    def worker_processes():
        """This process's spawned children, the workers (a worker just restarted may not have joined yet)."""
        pids = []
        for p in psutil.Process().children():
            try:
                if "spawn_main" in " ".join(p.cmdline()):
                    pids.append(p.pid)
            except psutil.Error:       # gone, or a zombie another test's subprocess left
                pass
        return pids

    def on_member(ev):
        if ev.member == 8 and not killed:
            killed[8] = [min(first)]
        elif ev.member == 24 and 24 not in killed:
            killed[24] = worker_processes()
        else:
            return
        for pid in killed[ev.member]:
            os.kill(pid, signal.SIGKILL)

    assert set(worker_processes()) == first      # the workers, as the operating system lists them
    cluster.on_note = notes.append
    try:
        b = Training(X, y, cfg).run(backend=cluster, on_member=on_member)
    finally:
        cluster.on_note = None
    assert sorted(killed) == [8, 24] and killed[24] and not set(killed[24]) & set(killed[8])
    assert_same(Training(X, y, cfg).run(), b)
    # chunks unreceived at member 24 lived only on the dead workers, with the table: sent again
    assert cluster.stats.resubmitted >= 1 and any("grown again" in n for n in notes)
    # the nannies start new worker processes in the killed ones' place (distributed's default)
    cluster.client.wait_for_workers(2, timeout=60)
    after = set(cluster.client.run(os.getpid).values())
    assert len(after) == 2 and not after & (first | set(killed[24]))


# ---------------------------------------------------------------- connecting

def test_local_cluster_listens_on_loopback_only(cluster):
    info = cluster.client.scheduler_info()
    assert cluster.address.startswith("tcp://127.0.0.1:")
    assert info["workers"] and all(w.startswith("tcp://127.0.0.1:") for w in info["workers"])
    # every listening socket of the scheduler (in this process) and of the workers, as the OS sees it
    pids = [os.getpid(), *cluster.client.run(os.getpid).values()]
    listening = [c.laddr.ip for pid in pids for c in psutil.Process(pid).net_connections(kind="inet")
                 if c.status == psutil.CONN_LISTEN]
    assert listening and set(listening) == {"127.0.0.1"}


def test_workers_threads_are_limited(cluster):
    """local:N: one thread per worker, and numba told so (NUMBA_NUM_THREADS is read at import)."""
    assert cluster.client.nthreads() and set(cluster.client.nthreads().values()) == {1}
    # a lambda: os.environ.get itself would travel with this process's environment
    assert set(cluster.client.run(lambda: os.environ.get("NUMBA_NUM_THREADS")).values()) == {"1"}
    # and Dask's sampling profiler, which would take a share of the cores, is off in them
    import dask
    assert set(cluster.client.run(lambda: dask.config.get("distributed.worker.profile.enabled")).values()) == {False}


@pytest.mark.parametrize("text,kind", [("local:3", ("local", 3)), ("tcp://10.0.0.5:8786", ("address", "tcp://10.0.0.5:8786")),
                                       ("tls://sched.example:8786", ("address", "tls://sched.example:8786")),
                                       ("10.0.0.5:8786", ("address", "tcp://10.0.0.5:8786"))])
def test_addresses(text, kind):
    assert parse_address(text) == kind


@pytest.mark.parametrize("text", ["local:0", "local:x", "http://host:8786", "tcp://host:port", "", "tcp://host:8786/x"])
def test_bad_addresses(text):
    with pytest.raises(ClusterError) as e:
        parse_address(text)
    assert "\n" not in str(e.value)


def test_nobody_answering_is_one_error():
    import socket
    with socket.socket() as s:      # a port nobody listens on: bound, never listening
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
        with pytest.raises(ClusterError) as e:
            Dask(f"tcp://127.0.0.1:{port}", timeout=1.5)
    assert f"cannot reach a Dask scheduler at tcp://127.0.0.1:{port} within 1.5 s" in str(e.value)
    assert "\n" not in str(e.value)


def test_without_the_extra_the_error_says_how_to_install(monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)    # import distributed -> ImportError
    with pytest.raises(ClusterError, match=r"pip install 'baggr\[cluster\]'"):
        Dask("local:1")


# ---------------------------------------------------------------- the command

BAGGR = [sys.executable, "-m", "baggr.cli"]
MEMBERS = 120
TIMES = {"grow_seconds", "fold_seconds", "keep_seconds", "measure_seconds", "importance_seconds", "seconds"}   # the model header's timings


def baggr_cli(*args, env=None, timeout=180):
    e = dict(os.environ, **(env or {}))
    return subprocess.run([*BAGGR, *map(str, args)], capture_output=True, text=True, timeout=timeout, env=e)


def train_args(data, rd, *extra):
    return ("train", data, "--target", "label", "--members", MEMBERS, "--threads", 2, "--run-dir", rd, "--no-ui",
            "--checkpoint-every", 8, *extra)


@pytest.fixture(scope="module")
def medium(tmp_path_factory):
    """noisy_halves 20,000 x 6 (tests/generators.py), and a run of it on local threads to compare with."""
    from baggr.cli.main import main
    d = tmp_path_factory.mktemp("cluster")
    path = d / "medium.csv"
    pacsv.write_csv(pa.table(noisy_halves(20_000, seed=7)), path)
    assert main([str(a) for a in train_args(path, d / "threads")]) == 0
    return path, d / "threads"


def same_run(rd, reference):
    """Model file (arrays bit for bit, header but times), report figures and journal curve."""
    ha, aa = read_joined(rd / MODEL)
    hb, ab = read_joined(reference / MODEL)
    assert sorted(aa) == sorted(ab)
    for k in aa:
        assert aa[k].dtype == ab[k].dtype and np.array_equal(aa[k], ab[k], equal_nan=True), k
    for k in set(ha) | set(hb) - {"created"}:
        if k == "stats":
            assert {x: v for x, v in ha[k].items() if x not in TIMES} == \
                {x: v for x, v in hb[k].items() if x not in TIMES}
        elif k != "created":
            assert ha[k] == hb[k], k
    ra, rb = (report.figures(report.load(d)) for d in (rd, reference))     # what `report --json` prints
    for k in ("elapsed", "path", "created"):
        ra.pop(k), rb.pop(k)
    grown = ra["config"].pop("cluster", None)     # where the members grew: said by the cluster's run only
    assert "cluster" not in rb["config"] and grown is not None and grown["address"].startswith("tcp://")
    ra["config"]["threads"] = rb["config"]["threads"]
    assert ra == rb
    a, b = journal.read_state(rd), journal.read_state(reference)
    assert a.status == "finished" and list(a.curve_error) == list(b.curve_error)


def test_command_on_a_local_cluster_same_as_threads(medium):
    """`baggr train --cluster local:1`: the job spawns its worker (which imports baggr.cli's main again)."""
    data, reference = medium
    rd = data.parent / "local1"
    r = baggr_cli(*train_args(data, rd, "--cluster", "local:1"))
    assert r.returncode == 0, r.stderr
    assert "x 6 features (2 classes), on local Dask cluster tcp://127.0.0.1:" in r.stdout
    same_run(rd, reference)
    start = next(ev for ev in journal.JournalReader(rd / "journal.jsonl").read_new() if ev["event"] == "start")
    assert start["cluster"] == "local:1" and start["cluster_address"].startswith("tcp://127.0.0.1:")
    assert start["cluster_threads"] == 1 and start["cluster_workers"] == 1
    # the dashboard's state and the report say where the members grew
    st = journal.read_state(rd)
    assert st.cluster == {"option": "local:1", "address": start["cluster_address"], "workers": 1, "threads": 1}
    text = baggr_cli("report", rd, env={"COLUMNS": "200"}).stdout
    line = next(x for x in text.splitlines() if "grown on" in x)
    assert f"local Dask cluster {start['cluster_address']} (1 worker, 1 thread)" in line
    r = baggr_cli("report", rd, "--html", rd / "report.html")
    assert r.returncode == 0, r.stderr
    assert f"local Dask cluster {start['cluster_address']} (1 worker, 1 thread)" in (rd / "report.html").read_text()


@pytest.fixture
def own_scheduler(tmp_path):
    """A scheduler and one worker in processes of their own (so the scheduler can be killed)."""
    env = dict(os.environ, NUMBA_NUM_THREADS="1")
    sf = tmp_path / "scheduler.json"
    procs = [subprocess.Popen([sys.executable, "-m", "distributed.cli.dask_scheduler", "--host", "127.0.0.1",
                               "--port", "0", "--no-dashboard", "--scheduler-file", sf],
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)]
    procs.append(subprocess.Popen([sys.executable, "-m", "distributed.cli.dask_worker", "--scheduler-file", sf,
                                   "--nthreads", "1", "--no-dashboard", "--no-nanny"],
                                  stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env))
    t0 = time.monotonic()
    while not sf.exists() and time.monotonic() - t0 < 60:
        time.sleep(0.05)
    yield json.loads(sf.read_text())["address"], procs[0]
    for p in procs:
        p.kill()
        p.wait()


def test_scheduler_killed_stops_cleanly_and_resumes_identically(medium, own_scheduler, cluster):
    data, reference = medium
    address, scheduler = own_scheduler
    rd = data.parent / "lost"
    proc = subprocess.Popen([*BAGGR, *map(str, train_args(data, rd, "--cluster", address))],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    t0 = time.monotonic()
    # early: chunks grow as members prove quick, and a run whose members have all reached the driver
    # finishes without its scheduler (nothing is lost), which is not what this test is about
    while journal.read_state(rd).members < 2:
        assert proc.poll() is None and time.monotonic() - t0 < 120, proc.communicate()
        time.sleep(0.005)
    scheduler.send_signal(signal.SIGKILL)
    out, err = proc.communicate(timeout=60)
    st = journal.read_state(rd)
    assert proc.returncode == 2 and 2 <= st.members < MEMBERS
    # one line, from the job: why, and what the checkpoint holds
    assert err.count("\n") == 1 and err.startswith(f"baggr: error: lost the Dask scheduler at {address}"), err
    assert f"checkpoint saved at {st.members} of {MEMBERS} members" in err
    assert st.status == "failed" and "lost the Dask scheduler" in st.reason
    assert json.loads((rd / "checkpoint.json").read_text())["member"] == st.members
    # resumed as a detached job (what `baggr resume DIR --cluster ADDRESS` starts on a terminal) on
    # another cluster, the module's: the same run as on threads throughout
    from baggr.runs import RunDir, spawn
    job = spawn(RunDir(rd), cluster=cluster.address)
    assert job.wait(timeout=180) == 0, (rd / "job.log").read_text()
    starts = [ev for ev in journal.JournalReader(rd / "journal.jsonl").read_new() if ev["event"] == "start"]
    assert [s.get("cluster") for s in starts] == [address, cluster.address] and starts[1]["resumed"]
    same_run(rd, reference)


def test_candidates_sharing_a_table_ship_it_once(cluster):
    """Two candidates on one binned table, grown in alternate blocks on the cluster (as a comparison
    grows them): the table is shipped once, each candidate's Grower kept on the workers between its
    blocks, and both end the same as on threads."""
    X, y = twonorm(3000, seed=12)
    first = Training(X, y, Config(members=30, seed=3, threads=2, features_per_split=2))
    prep = first.prep
    second = Training(None, None, Config(members=30, seed=3, threads=2, features_per_split=6), prepared=prep)
    shipped = cluster.shipped
    for until in (10, 20, 30):
        a = first.run(until=until, backend=cluster)
        b = second.run(until=until, backend=cluster)
    assert cluster.shipped == shipped + 1
    for tr, ens in ((first, a), (second, b)):
        assert_same(Training(X, y, tr.config).run(), ens)


COMPARE = ("--target", "label", "--features-per-split", "1,3", "--min-leaf", "1,8", "--members", 24, "--block", 8,
           "--threads", 2, "--checkpoint-every", 4, "--no-ui")


@pytest.fixture(scope="module")
def compared(medium):
    """A comparison of 4 candidates on local threads, to compare with."""
    from baggr.cli.main import main
    data, _ = medium
    rd = data.parent / "compare-threads"
    assert main([str(a) for a in ("compare", data, *COMPARE, "--run-dir", rd)]) == 0
    return rd


def same_comparison(rd, reference):
    """Every candidate's model bit for bit, and the ranked figures but times."""
    from baggr.cli import compare_report
    names = sorted(p.name for p in reference.iterdir() if p.is_dir())
    assert len(names) == 4 and names == sorted(p.name for p in rd.iterdir() if p.is_dir())
    for name in names:
        _, aa = read_joined(rd / name / MODEL)
        _, ab = read_joined(reference / name / MODEL)
        assert sorted(aa) == sorted(ab) and all(np.array_equal(aa[k], ab[k], equal_nan=True) for k in aa), name
    ra, rb = (compare_report.to_json(compare_report.load(d)) for d in (rd, reference))
    times = ("run_dir", "seconds_per_member")
    assert [{k: v for k, v in c.items() if k not in times} for c in ra["candidates"]] == \
        [{k: v for k, v in c.items() if k not in times} for c in rb["candidates"]]
    return names


def test_comparison_on_the_cluster_same_as_threads(medium, compared, cluster, tmp_path):
    """`baggr compare --cluster ADDRESS`: every candidate's members grow on the cluster (here the module's
    scheduler, reached by its address) and each candidate ends as on local threads, bit for bit."""
    from baggr.cli.main import main
    data, _ = medium
    rd = tmp_path / "cluster"
    assert main([str(a) for a in ("compare", data, *COMPARE, "--run-dir", rd, "--cluster", cluster.address)]) == 0
    for name in same_comparison(rd, compared):
        start = next(ev for ev in journal.JournalReader(rd / name / "journal.jsonl").read_new() if ev["event"] == "start")
        assert start["cluster_address"] == cluster.address and start["cluster_workers"] == 2
    start = next(ev for ev in journal.JournalReader(rd / "journal.jsonl").read_new() if ev["event"] == "start")
    assert start["kind"] == "comparison" and start["cluster"] == cluster.address


def test_comparison_survives_its_scheduler(medium, compared, own_scheduler, tmp_path):
    """The scheduler killed mid-comparison: one line, exit 2, every candidate's members in its checkpoint;
    `baggr resume` on local threads ends it as a comparison never interrupted."""
    data, _ = medium
    address, scheduler = own_scheduler
    rd = tmp_path / "lost"
    proc = subprocess.Popen([*BAGGR, *map(str, ("compare", data, *COMPARE, "--run-dir", rd, "--cluster", address))],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    t0 = time.monotonic()
    while sum(journal.read_state(p).members for p in rd.glob("c*") if p.is_dir()) < 20:
        assert proc.poll() is None and time.monotonic() - t0 < 120, proc.communicate()
        time.sleep(0.005)
    scheduler.send_signal(signal.SIGKILL)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode == 2 and err.count("\n") == 1 and "lost the Dask scheduler" in err, err
    for p in (p for p in rd.iterdir() if p.is_dir()):
        st = journal.read_state(p)
        ck = json.loads((p / "checkpoint.json").read_text())["member"] if (p / "checkpoint.json").exists() else 0
        assert ck == st.members, p.name       # nothing grown is lost
    r = baggr_cli("resume", rd, "--no-ui")
    assert r.returncode == 0, r.stderr
    same_comparison(rd, compared)


def test_bad_address_is_one_line(medium, tmp_path):
    import socket
    data, reference = medium
    with socket.socket() as s:      # a port nobody listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
        r = baggr_cli(*train_args(data, tmp_path / "bad", "--cluster", f"tcp://127.0.0.1:{port}"),
                      env={"BAGGR_CLUSTER_TIMEOUT": "1"})
    assert r.returncode == 2 and r.stdout == ""
    assert r.stderr == f"baggr: error: cannot reach a Dask scheduler at tcp://127.0.0.1:{port} within 1 s " \
                       f"(Timed out trying to connect to tcp://127.0.0.1:{port} after 1 s)\n"
    assert not (tmp_path / "bad").exists()     # a run that never started leaves no directory
    r = baggr_cli(*train_args(data, tmp_path / "bad", "--cluster", "http://host:8786"))
    assert r.returncode == 2 and r.stderr.count("\n") == 1 and "not a scheduler address" in r.stderr
    r = baggr_cli("resume", reference, "--no-ui", "--cluster", "local:zero")
    assert r.returncode == 2 and r.stderr == "baggr: error: local:N needs a whole number of workers >= 1, " \
                                             "got 'local:zero'\n"


def test_command_without_the_extra_says_how_to_install(medium, tmp_path):
    data, _ = medium
    code = ("import sys; sys.modules['distributed'] = None; from baggr.cli.main import main; "
            f"sys.exit(main({[str(a) for a in train_args(data, tmp_path / 'none', '--cluster', 'local:2')]!r}))")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert r.returncode == 2
    assert r.stderr == "baggr: error: --cluster needs Dask's distributed scheduler, which is not installed: " \
                       "pip install 'baggr[cluster]'\n"
    assert not (tmp_path / "none").exists()


def _writeable(prep):
    return {k: getattr(prep, k).flags.writeable for k in ("codes", "y_class", "y_value")}


def test_workers_get_the_drivers_read_only_flags(cluster):
    """numba compiles a kernel once per read-only flag of its arrays: the table reaches the workers with
    the driver's flags (Dask's serialisation keeps them), so both run the same compiled code, and a
    local:N worker finds in the cache what the driver's warm-up compiled (numba's typing; from memory)."""
    X, y = labelled(500, seed=1)
    prep = Training(X, y, Config()).prep.for_workers()
    prep.y_class.flags.writeable = False          # as a target read from a CSV file arrives (Arrow's memory)
    shipped = cluster.client.scatter(prep, broadcast=True, hash=False)
    seen = cluster.client.submit(_writeable, shipped, pure=False).result()
    assert seen == _writeable(prep) == {"codes": True, "y_class": False, "y_value": True}


# ---------------------------------------------------------------- TLS

def _certificate(d):
    """A self-signed certificate for 127.0.0.1 (its own authority), made by the openssl command:
    `cryptography`, which distributed's Security.temporary() needs, is not installed here."""
    import shutil
    openssl = shutil.which("openssl")
    if openssl is None:
        pytest.skip("neither cryptography (Security.temporary) nor the openssl command is available")
    cert, key = d / "cert.pem", d / "key.pem"
    subprocess.run([openssl, "req", "-x509", "-newkey", "ec", "-pkeyopt", "ec_paramgen_curve:prime256v1",
                    "-nodes", "-keyout", key, "-out", cert, "-days", "1", "-subj", "/CN=127.0.0.1",
                    "-addext", "subjectAltName=IP:127.0.0.1"], check=True, capture_output=True, timeout=60)
    return str(cert), str(key)


def test_a_tls_cluster_grows_the_same_members(tmp_path):
    """A scheduler and worker that accept TLS only (require_encryption), reached with `tls://` and the
    certificate settings the README gives (DASK_DISTRIBUTED__COMM__TLS__*, here through dask.config):
    the same run as on threads. Without the settings, one line that says what is missing."""
    import dask
    import distributed
    from distributed.security import Security
    cert, key = _certificate(tmp_path)
    sec = Security(tls_ca_file=cert, tls_scheduler_cert=cert, tls_scheduler_key=key, tls_worker_cert=cert,
                   tls_worker_key=key, tls_client_cert=cert, tls_client_key=key, require_encryption=True)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True, protocol="tls",
                                  host="127.0.0.1", security=sec, dashboard_address="127.0.0.1:0",
                                  env={"NUMBA_NUM_THREADS": "1"}) as local:
        address = local.scheduler_address
        assert address.startswith("tls://127.0.0.1:")
        with pytest.raises(ClusterError) as e:
            Dask(address, timeout=5)
        assert f"{address} needs TLS settings" in str(e.value) and "\n" not in str(e.value)
        X, y = labelled(2000, seed=5)
        cfg = Config(members=12, seed=4, threads=2)
        with dask.config.set({"distributed.comm.tls.ca-file": cert, "distributed.comm.tls.client.cert": cert,
                              "distributed.comm.tls.client.key": key}):
            with Dask(address, timeout=60) as backend:
                b = Training(X, y, cfg).run(backend=backend)
                assert backend.describe()["cluster_address"] == address and backend.shipped == 1
        assert_same(Training(X, y, cfg).run(), b)
