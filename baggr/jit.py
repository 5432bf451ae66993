"""numba flags in one place: every kernel is compiled with these; and `borrow`, views without reference counts."""
import numba
from numba.core import cgutils, types
from numba.extending import intrinsic

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


def _unowned(context, builder, ty, value):
    """The array value with no meminfo and no parent: numba counts no references to it."""
    ary = context.make_array(ty)(context, builder, value=value)
    ary.meminfo = cgutils.get_null_value(ary.meminfo.type)
    ary.parent = cgutils.get_null_value(ary.parent.type)
    return ary._getvalue()


@intrinsic
def borrow(typingctx, arrays):
    """The same array, or tuple (named or not) of arrays, as views that numba keeps no reference
    count for: passing them on, to inlined helpers or kernels, costs no atomic updates.

    Use only on arrays the calling kernel's own caller holds for the whole call (its arguments),
    and never return or keep a borrowed view. numba counts a reference for every copy of an array
    variable, and an inlined helper copies each array it takes; its pruning pass removes most
    such pairs, but not those alive across a call to another kernel, nor some that LLVM merges
    across branches, and then each costs two atomic operations per call.
    """
    if isinstance(arrays, types.Array):
        def codegen(context, builder, sig, args):
            return _unowned(context, builder, arrays, args[0])
        return arrays(arrays), codegen
    if isinstance(arrays, types.BaseTuple) and all(isinstance(t, types.Array) for t in arrays.types):
        def codegen(context, builder, sig, args):
            items = [_unowned(context, builder, t, builder.extract_value(args[0], i))
                     for i, t in enumerate(arrays.types)]
            return context.make_tuple(builder, arrays, items)
        return arrays(arrays), codegen
    return None
