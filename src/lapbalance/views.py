"""Array views without a reference count, for the solver's hot numba call chains.

Numba passes every array argument of a compiled call with its reference count: each call
level increments and decrements it with atomic instructions, once per array. The solver's
searches make tens of millions of small nested calls per lap, each carrying the parameter
vector, the aero-map grids and the output buffer; measured on a 2-core machine, a usage
evaluation through its four call levels cost 290-310 ns that way against 165 ns through
borrowed views (the same arithmetic, the same results bit for bit).

:func:`borrowed` returns a view of an array with no owner (a null memory-info pointer, as
numba's own parallel loops use), so passing it costs no reference counting. Rules, since
numba then cannot keep the memory alive:

* borrow only arrays some caller owns for the whole time the view is used: the kernel's own
  arguments (the Python caller holds them), or arrays the kernel allocated and keeps alive
  with :func:`keep_alive` after the view's last use;
* never return a borrowed view, store it in another array or a tuple that outlives the
  kernel, or hand it back to Python.
"""

from __future__ import annotations

from numba import types
from numba.core import cgutils
from numba.extending import intrinsic, overload


def borrowed(arr):
    """View of array ``arr`` (same type, data, shape and strides) without a reference count.

    In compiled code a view with a null memory-info pointer; in plain Python (the kernels run
    uncompiled, e.g. under ``NUMBA_DISABLE_JIT=1``) the array itself."""
    return arr


def keep_alive(arr):
    """Use of ``arr`` that does nothing: placed after the last use of a view borrowed from
    ``arr``, it keeps numba from releasing ``arr`` before then (plain Python: nothing)."""
    return None


@intrinsic
def _borrow(typingctx, arr):
    if not isinstance(arr, types.Array):
        return None

    def codegen(context, builder, sig, args):
        src = context.make_array(arr)(context, builder, value=args[0])
        dst = context.make_array(arr)(context, builder)
        dst.meminfo = cgutils.get_null_value(dst.meminfo.type)
        dst.parent = cgutils.get_null_value(dst.parent.type)
        dst.nitems = src.nitems
        dst.itemsize = src.itemsize
        dst.data = src.data
        dst.shape = src.shape
        dst.strides = src.strides
        return dst._getvalue()

    return arr(arr), codegen


@intrinsic
def _use(typingctx, arr):
    if not isinstance(arr, types.Array):
        return None

    def codegen(context, builder, sig, args):
        return context.get_dummy_value()

    return types.none(arr), codegen


@overload(borrowed, inline="always")
def _borrowed_compiled(arr):
    if isinstance(arr, types.Array):
        return lambda arr: _borrow(arr)
    return None


@overload(keep_alive, inline="always")
def _keep_alive_compiled(arr):
    if isinstance(arr, types.Array):
        return lambda arr: _use(arr)
    return None
