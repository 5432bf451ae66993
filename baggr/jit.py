"""numba flags in one place: every kernel is compiled with these."""
import numba

# cache=True: the second run does not recompile; nogil=True: members grow in parallel Python threads.
KERNEL = dict(cache=True, nogil=True, boundscheck=False, error_model="numpy")

njit = numba.njit


KERNELS: list = []   # every kernel made by `kernel`, in the order their modules were imported


def kernel(fn):
    """Compile a kernel with the project's flags."""
    d = numba.njit(**KERNEL)(fn)
    KERNELS.append(d)
    return d


def cached(dispatcher) -> bool:
    """Whether a kernel has compiled code on disk for its current source (cheap: reads its cache index).

    False when it has never been compiled here, or its source changed since: its first call compiles.
    """
    if dispatcher.signatures:          # compiled or loaded in this process already
        return True
    try:
        return bool(dispatcher._cache._cache_file._load_index())
    except Exception:                  # noqa: BLE001 - numba's cache layout is not a public interface
        return True                    # unknown: say nothing rather than promise a wait
