"""Point numba's on-disk cache at a writable folder before numba is imported.

numba caches compiled kernels beside their source file by default, which fails
silently (and recompiles every run) when the package is installed read-only. Unless
the user set ``NUMBA_CACHE_DIR``, segcut uses ``$XDG_CACHE_HOME/segcut/numba``
(``~/.cache/segcut/numba``).
"""

import os


def configure_numba_cache() -> None:
    if os.environ.get("NUMBA_CACHE_DIR"):
        return
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    path = os.path.join(base, "segcut", "numba")
    try:
        os.makedirs(path, exist_ok=True)
    except OSError:
        return  # numba falls back to its own default
    os.environ["NUMBA_CACHE_DIR"] = path
