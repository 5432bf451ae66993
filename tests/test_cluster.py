"""Members grown on a Dask cluster give the same run, bit for bit, as local threads.

One process cluster of 2 workers (`local:2`, started through the backend itself) serves the module.
The workers are spawned processes that import baggr from this checkout (PYTHONPATH is inherited).
Members are pure functions of (seed, m) and tallies add (DESIGN.md "Invariants"), so every result
here is compared for exact equality with a run on local threads.
"""
import os
import signal
import sys

import numpy as np
import psutil
import pytest

pytest.importorskip("distributed", reason="the cluster extra is not installed: pip install -e '.[cluster]'")

import baggr  # noqa: E402
from baggr.backends.dask import Dask, parse_address  # noqa: E402
from baggr.config import Config  # noqa: E402
from baggr.engine import Training  # noqa: E402
from baggr.errors import ClusterError  # noqa: E402
from generators import friedman1, twonorm  # noqa: E402


@pytest.fixture(scope="module")
def cluster():
    with Dask("local:2", timeout=60) as backend:
        yield backend


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

@pytest.mark.parametrize("settings", [dict(), dict(draw="balanced", vote="shares", keep_members=False)],
                         ids=["kept", "balanced-estimate-only"])
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
    later.restore(arrays, header, first.trees)
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

def test_a_worker_killed_mid_run_changes_nothing(cluster):
    X, y = twonorm(8000, seed=6)
    cfg = Config(members=40, seed=4, threads=2, features_per_split=4)
    before = set(cluster.client.run(os.getpid).values())
    victim = min(before)
    killed = []

    def on_member(ev):
        if ev.member == 8 and not killed:
            os.kill(victim, signal.SIGKILL)
            killed.append(ev.member)

    b = Training(X, y, cfg).run(backend=cluster, on_member=on_member)
    assert killed == [8]
    assert_same(Training(X, y, cfg).run(), b)
    # the nanny starts a new worker process in the killed one's place (distributed's default)
    cluster.client.wait_for_workers(2, timeout=60)
    after = set(cluster.client.run(os.getpid).values())
    assert victim not in after and len(after) == 2


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
