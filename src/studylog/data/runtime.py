"""Process-wide settings of the data libraries, for the commands that read whole files.

The allocator settings are choices for the whole process: only the command line's ``check`` and
``profile`` make them, so a notebook using the Python API keeps its own. ``arrow_without_pandas`` is
safe anywhere: it does nothing once pandas is imported, and pyarrow imports pandas later if asked for
pandas objects.
"""

from __future__ import annotations

import os
import sys
from typing import Any

# glibc's mallopt parameters
M_TRIM_THRESHOLD = -1
M_MMAP_THRESHOLD = -3


class _NoPandas:
    """An import finder that reports pandas missing (see ``arrow_without_pandas``)."""

    def find_spec(self, name: str, path: Any = None, target: Any = None) -> None:
        if name == "pandas" or name.startswith("pandas."):
            raise ImportError("pandas is not needed here")


def arrow_without_pandas() -> None:
    """Keep pyarrow from importing pandas, a fifth of a second of every check and profile.

    pyarrow looks for pandas the first time it converts Python values (any ``pa.array`` or scalar
    argument) and would import it then; these commands hand it no pandas objects. pyarrow is let to
    find pandas absent once, and asks again (and imports it) only when pandas objects are really wanted.
    """
    import sys

    if "pandas" in sys.modules:
        return
    import pyarrow as pa

    finder = _NoPandas()
    sys.meta_path.insert(0, finder)
    try:
        pa.array([0])
    finally:
        sys.meta_path.remove(finder)


# how long Arrow's default allocator (mimalloc) keeps freed pages before it hands them back, in ms
PROFILE_PURGE_DELAY_MS = 1000


def keep_freed_arrow_memory(delay_ms: int = PROFILE_PURGE_DELAY_MS) -> bool:
    """Ask mimalloc, Arrow's default allocator, to keep freed pages ``delay_ms`` before handing them
    back to the system (its default is 10 ms), where the user has not chosen; True when it can still
    take effect.

    The profile frees and makes column-sized Arrow buffers all the time; handed back within
    milliseconds, their pages were faulted in afresh by the next ones, half of the run's time in the
    kernel. mimalloc reads its settings from the environment when the library loads, so this must come
    before pyarrow is imported.
    """
    os.environ.setdefault("MIMALLOC_PURGE_DELAY", str(delay_ms))
    return "pyarrow" not in sys.modules


def prefer_jemalloc(decay_ms: int | None = None) -> None:
    """Make jemalloc Arrow's allocator, where pyarrow is built with it (else keep its default).

    The check allocates and frees column-sized buffers all the time; mimalloc, Arrow's default, hands
    freed pages back to the system within milliseconds, jemalloc keeps them for reuse: less of the
    run's CPU in the kernel, and a lower peak. (The profile keeps mimalloc with a longer delay,
    ``keep_freed_arrow_memory``, and numpy's huge pages: the two together took half its system time
    off, where jemalloc with small pages did less.) ``decay_ms``: how long freed
    pages are kept (jemalloc's default here is a second). The check keeps them a tenth of a second
    (``CHECK_DECAY_MS``): a second's worth of its batches' buffers was some 50 MB of its peak, and
    the shorter time cost no measurable time; with none kept (0) the kernel's work doubled.
    """
    import pyarrow as pa

    try:
        pa.set_memory_pool(pa.jemalloc_memory_pool())
        if decay_ms is not None:
            pa.jemalloc_set_decay_ms(decay_ms)
    except (NotImplementedError, pa.ArrowException):  # a pyarrow built without jemalloc
        pass


CHECK_DECAY_MS = 100


def reuse_freed_memory() -> None:
    """Let glibc keep the memory of freed arrays of up to 32 MB for the next ones.

    Profiling makes and frees thousands of column-sized numpy arrays; by default glibc hands each one
    of some megabytes back to the system and maps it afresh for the next, and the kernel's work of
    unmapping, mapping and zeroing those pages took as much CPU as a third of the profile. Other C
    libraries have no such call and keep their default. (The check does not ask for it: it raised the
    check's peak memory more than it saved time.)
    """
    try:
        import ctypes

        libc = ctypes.CDLL("libc.so.6")
        libc.mallopt(M_MMAP_THRESHOLD, 32 << 20)
        libc.mallopt(M_TRIM_THRESHOLD, 1 << 30)
    except (OSError, AttributeError):
        pass


def one_blas_thread() -> bool:
    """Ask the BLAS libraries of numpy and scipy (OpenBLAS) for one thread, where the user has not
    chosen a number; True when it can still take effect.

    OpenBLAS starts a thread per core when it loads, and they spin waiting for work after every call:
    on two cores they took a tenth of the profile's CPU from the threads doing the work, for matrix
    products of a few columns that one thread does as fast. The library reads the setting when it
    loads, so this must come before numpy is imported (pyarrow imports it).
    """
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    return "numpy" not in sys.modules
