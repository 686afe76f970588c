"""Compiled loops (numba) for the few places where numpy's whole-array operations cost too much.

``compiled`` compiles a function of plain numbers and arrays to machine code that runs without
the GIL (so other threads go on meanwhile) and with numpy's arithmetic rules (a division by
zero gives inf or NaN, as in numpy, rather than raising). The machine code is cached next to the
source, or in the user's cache folder (``NUMBA_CACHE_DIR`` chooses another); where neither can
be written it is compiled anew in each process (about two seconds), never refused.
"""

from __future__ import annotations

import numba

_OPTIONS = {"nogil": True, "error_model": "numpy"}


def compiled(function):
    """``function`` compiled with numba (cached when a cache folder can be written)."""
    try:
        return numba.njit(cache=True, **_OPTIONS)(function)
    except RuntimeError:  # "cannot cache function ...: no locator available"
        return numba.njit(**_OPTIONS)(function)
