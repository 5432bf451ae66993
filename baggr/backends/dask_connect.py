"""Reaching a Dask cluster: the --cluster option's forms, the client (to an address, or to a process
cluster started on this machine's loopback for local:N), and the checks before members are sent:
a first worker within the timeout, and every worker running the same versions as the driver.
"""
from __future__ import annotations

import logging
import os

from baggr.errors import ClusterError

INSTALL = "pip install 'baggr[cluster]'"
TIMEOUT = 10.0                    # seconds to reach the scheduler and see a first worker
TIMEOUT_ENV = "BAGGR_CLUSTER_TIMEOUT"
SCHEMES = ("tcp", "tls", "ws", "wss", "ucx", "inproc")
# Worker processes of local:N: one thread each, and no library below it starting threads of its own.
WORKER_ENV = {"NUMBA_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1",
              "MKL_NUM_THREADS": "1"}
# local:N shares this machine's cores with the driver: Dask's own sampling (a profiler every 10 ms, the
# GIL every 1 ms, event loop checks every 20 ms, memory every 100 ms) costs an idle local:2 about a tenth
# of a core; less often, about a hundredth (bench/README.md). Workers get these settings from their nanny.
LOCAL_CONFIG = {"distributed.worker.profile.enabled": False,
                "distributed.admin.system-monitor.gil.enabled": False,
                "distributed.admin.tick.interval": "500ms",
                "distributed.admin.system-monitor.interval": "2s",
                "distributed.worker.memory.monitor-interval": "1s"}


def timeout_default() -> float:
    """TIMEOUT, or BAGGR_CLUSTER_TIMEOUT when set (a batch queue may take minutes to start workers)."""
    text = os.environ.get(TIMEOUT_ENV)
    if not text:
        return TIMEOUT
    try:
        value = float(text)
    except ValueError:
        value = -1.0
    if not value > 0:
        raise ClusterError(f"{TIMEOUT_ENV} must be a number of seconds above 0, got {text!r}")
    return value


def parse_address(text: str) -> tuple[str, str | int]:
    """("local", N) for local:N, else ("address", "scheme://host[:port]"); ClusterError if neither."""
    s = text.strip()
    if s.startswith("local:"):
        n = s[len("local:"):]
        if not n.isdigit() or int(n) < 1:
            raise ClusterError(f"local:N needs a whole number of workers >= 1, got {text!r}")
        return "local", int(n)
    scheme, sep, rest = s.partition("://")
    if not sep:
        scheme, rest = "tcp", s
    if "@" in rest:
        raise ClusterError(f"a scheduler address holds no user name or password: {shown_address(text)!r} "
                           "(Dask authenticates with TLS certificates; see the README's section on TLS)")
    host, colon, port = rest.rpartition(":")
    if scheme not in SCHEMES or not rest or "/" in rest or (colon and not (port.isdigit() and host)):
        raise ClusterError(f"not a scheduler address: {text!r} (expected tcp://HOST:PORT, tls://HOST:PORT or local:N)")
    return "address", f"{scheme}://{rest}"


def shown_address(text: str | None) -> str | None:
    """An address fit to write down (journal, dashboard, report): any user name or password before an
    '@' and anything after a '?' or '#' removed (an address never needs them; a URL-minded user may
    still type them)."""
    if text is None:
        return None
    s = str(text).strip()
    scheme, sep, rest = s.partition("://")
    if not sep:
        scheme, rest = "", s
    rest = rest.split("?", 1)[0].split("#", 1)[0].rpartition("@")[2]
    return f"{scheme}{sep}{rest}"


def check_option(text: str) -> str:
    """The --cluster option as given, once its form is right and Dask's distributed is installed
    (ClusterError otherwise); cheap: nothing is imported or connected."""
    parse_address(text)
    import importlib.util
    try:
        found = importlib.util.find_spec("distributed") is not None
    except (ImportError, ValueError):
        found = False
    if not found:
        raise ClusterError(f"--cluster needs Dask's distributed scheduler, which is not installed: {INSTALL}")
    return text.strip()


def quiet_logs() -> None:
    """Silence Dask's own log lines in this process (a command says what matters in its own words:
    a lost scheduler would otherwise also print reconnection attempts and tracebacks)."""
    _distributed()          # its logging is configured on import: set the levels after that
    for name in list(logging.root.manager.loggerDict):
        if name.split(".")[0] in ("distributed", "tornado"):
            logging.getLogger(name).setLevel(logging.CRITICAL + 1)
    logging.getLogger("distributed").setLevel(logging.CRITICAL + 1)


def _distributed():
    try:
        import distributed
    except ImportError:
        raise ClusterError(f"growing members on a cluster needs Dask's distributed scheduler: {INSTALL}") from None
    return distributed


_CLIENT = None


def _client_class():
    """distributed.Client, except that a client whose connection failed stops its event loop thread at
    once, and is then dropped without trying to close that connection again (which waits and prints an
    ignored exception)."""
    global _CLIENT
    if _CLIENT is None:
        distributed = _distributed()

        class QuietClient(distributed.Client):
            def __init__(self, *args, **kwargs):
                try:
                    super().__init__(*args, **kwargs)
                except BaseException:
                    runner = getattr(self, "_loop_runner", None)
                    if runner is not None:
                        try:
                            runner.stop()
                        except Exception:   # noqa: BLE001 - the connection's own error is the one to tell
                            pass
                    raise

            def __del__(self):
                if self.status in ("running", "closing"):
                    try:
                        super().__del__()
                    except Exception:   # noqa: BLE001 - nothing to tell at garbage collection
                        pass
        _CLIENT = QuietClient
    return _CLIENT


def one_line(e: BaseException) -> str:
    """The first line of an exception's message (its type's name when it has none)."""
    text = str(e).strip().splitlines()
    return text[0] if text else type(e).__name__


def connect(cluster, timeout: float):
    """(client, local cluster or None, whether the client is ours to close), once a first worker is
    there and every worker runs what this machine runs; ClusterError (one line) otherwise."""
    distributed = _distributed()
    local, own = None, isinstance(cluster, str)
    if isinstance(cluster, distributed.Client):
        client = cluster
    elif isinstance(cluster, str):
        kind, value = parse_address(cluster)
        if kind == "local":
            client, local = _start_local(distributed, value, timeout)
        else:
            client = _client_to(value, timeout)
    else:
        raise ClusterError(f"cluster must be a scheduler address, local:N or a distributed.Client, "
                           f"got {type(cluster).__name__}")
    try:
        check_workers(client, timeout)
    except BaseException:
        close(client if own else None, local, timeout)
        raise
    return client, local, own


def close(client, local, timeout: float) -> None:
    """Close a client and a local cluster this module made (either may be None)."""
    for thing in (client, local):
        if thing is not None:
            try:
                thing.close(timeout=timeout)
            except (OSError, TimeoutError, RuntimeError):
                pass


def _client_to(address: str, timeout: float):
    try:
        return _client_class()(address, timeout=timeout, set_as_default=False)
    except OSError as e:      # refused, unknown host, timed out (TimeoutError is one)
        raise ClusterError(f"cannot reach a Dask scheduler at {address} within {timeout:g} s ({one_line(e)})") from None
    except TypeError as e:   # distributed's word for a tls:// address without TLS settings
        if address.startswith("tls://") and "ssl" in str(e).lower():
            raise ClusterError(f"{address} needs TLS settings (a CA file, a client certificate and its key, "
                               "e.g. DASK_DISTRIBUTED__COMM__TLS__CA_FILE; see the README's section on TLS)") from None
        raise ClusterError(f"{address} answered, but not as a Dask scheduler ({type(e).__name__}); "
                           "is it the scheduler's address and port?") from None
    except Exception as e:   # noqa: BLE001 - something answered, not in Dask's protocol
        raise ClusterError(f"{address} answered, but not as a Dask scheduler ({type(e).__name__}); "
                           "is it the scheduler's address and port?") from None


def _start_local(distributed, n: int, timeout: float):
    local = None
    try:
        import copy

        import dask
        with dask.config.set(LOCAL_CONFIG):
            # config: a deep copy for the nannies, which keep a shallow one and would otherwise start a
            # worker again (after a kill) with the settings restored when this block ends
            local = distributed.LocalCluster(
                n_workers=n, threads_per_worker=1, processes=True, host="127.0.0.1", protocol="tcp",
                # its HTTP endpoints on a free loopback port: two local clusters at once do not
                # compete for the default one (8787)
                dashboard_address="127.0.0.1:0", env=dict(WORKER_ENV), silence_logs=logging.CRITICAL,
                config=copy.deepcopy(dask.config.config))
        # the driver reaches its own workers: results come straight from them, not through the scheduler
        return _client_class()(local, timeout=timeout, set_as_default=False, direct_to_workers=True), local
    except (OSError, RuntimeError, ValueError) as e:
        close(None, local, timeout)
        raise ClusterError(f"cannot start a local cluster of {n} workers ({one_line(e)})") from None


def check_workers(client, timeout: float) -> None:
    """Wait for a first worker, then check every worker grows members with the same code as here."""
    from baggr.backends import dask_worker
    address = client.scheduler.address
    try:
        client.wait_for_workers(1, timeout=timeout)
    except (OSError, TimeoutError):
        raise ClusterError(f"the Dask scheduler at {address} has no workers (waited {timeout:g} s; "
                           f"{TIMEOUT_ENV} sets the wait)") from None
    here = dask_worker.versions()
    try:
        seen = client.run(dask_worker.versions, on_error="return")
    except OSError as e:
        raise ClusterError(f"the Dask scheduler at {address} stopped answering ({one_line(e)})") from None
    for worker, v in sorted(seen.items()):
        if isinstance(v, BaseException):
            raise ClusterError(f"worker {worker} cannot run baggr ({type(v).__name__}: {one_line(v)}); "
                               f"install baggr {here['baggr']} on every worker")
        if v != here:
            diff = ", ".join(f"{k} {v.get(k)} there, {here[k]} here" for k in here if v.get(k) != here[k])
            raise ClusterError(f"worker {worker} runs other versions than this machine ({diff}): "
                               "members must be grown by the same code everywhere")
