"""Give freed memory back to the operating system after a large run.

numpy releases big arrays at once, but glibc's allocator keeps much of what was freed (its mmap
threshold grows with the largest block freed, so later blocks come from the heap and stay there).
After an algorithm has handled millions of cells, the QGIS process would keep a few hundred MB it no
longer uses, and the next run would peak that much higher. ``release()`` asks glibc to return free
memory (``malloc_trim``); elsewhere (Windows, macOS, other C libraries) it does nothing.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import sys

_LIBC = None


def release() -> bool:
    """Return free heap memory to the OS where glibc allows it; True if it was asked."""
    global _LIBC
    if not sys.platform.startswith("linux"):
        return False
    try:
        if _LIBC is None:
            _LIBC = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        trim = getattr(_LIBC, "malloc_trim", None)
        if trim is None:
            return False
        trim(ctypes.c_size_t(0))
        return True
    except OSError:
        return False
