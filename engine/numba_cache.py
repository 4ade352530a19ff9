"""Where numba keeps the compiled kernels (``cache=True``) when the install is read-only.

numba caches beside the source (``__pycache__``), else in the user's cache folder
(``~/.cache/numba``), else in ``NUMBA_CACHE_DIR``; when none is writable, defining a cached
kernel fails ("cannot cache function ... no locator available"). :func:`ensure_cache_dir` then
points ``NUMBA_CACHE_DIR`` at a per-user folder under the temporary directory, before numba reads
its configuration. Nothing changes when the install or the user's cache folder is writable, or
when ``NUMBA_CACHE_DIR`` is set already.
"""

from __future__ import annotations

import os
import sys


def _writable(folder: str) -> bool:
    """Whether ``folder`` (or, when it does not exist yet, its nearest existing parent) can be
    written."""
    while folder and not os.path.exists(folder):
        parent = os.path.dirname(folder)
        if parent == folder:
            return False
        folder = parent
    return bool(folder) and os.access(folder, os.W_OK)


def ensure_cache_dir(package_dir: str) -> str | None:
    """Set ``NUMBA_CACHE_DIR`` to a temporary per-user folder when neither ``package_dir`` (the
    kernels' ``__pycache__``) nor the user's cache folder is writable; returns the folder set,
    or None."""
    if os.environ.get("NUMBA_CACHE_DIR"):
        return None
    user_cache = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"),
                                                                   ".cache")
    if _writable(package_dir) or _writable(user_cache):
        return None
    import tempfile

    folder = os.path.join(tempfile.gettempdir(), f"ohmgraph-numba-{os.getuid()}")
    os.environ["NUMBA_CACHE_DIR"] = folder
    if "numba" in sys.modules:                 # numba imported first: its configuration is read
        sys.modules["numba"].config.CACHE_DIR = folder
    return folder
