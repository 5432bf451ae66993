"""numba flags in one place: every kernel is compiled with these."""
import numba

# cache=True: the second run does not recompile; nogil=True: members grow in parallel Python threads.
KERNEL = dict(cache=True, nogil=True, boundscheck=False, error_model="numpy")

njit = numba.njit


def kernel(fn):
    """Compile a kernel with the project's flags."""
    return numba.njit(**KERNEL)(fn)
