"""Point numba's compile cache at a writable folder before any kernel module is imported.

numba writes its cache beside the module (``__pycache__``); when the package is installed read-only and
``~/.cache`` is not writable either, ``@njit(cache=True)`` makes the *import* fail. We choose the folder
ourselves: the package folder when writable, else ``$HASHAUDIT_CACHE_DIR`` or ``$XDG_CACHE_HOME/hashaudit``.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path


def _writable(path: Path) -> bool:
    try:
        path.mkdir(parents=True, exist_ok=True)
        probe = tempfile.NamedTemporaryFile(dir=path, delete=True)
        probe.close()
        return True
    except OSError:
        return False


def configure_numba_cache() -> str | None:
    """Set ``NUMBA_CACHE_DIR`` when the package folder cannot hold the cache; return the folder chosen."""
    if os.environ.get("NUMBA_CACHE_DIR"):
        return os.environ["NUMBA_CACHE_DIR"]
    package_cache = Path(__file__).parent / "hashes" / "__pycache__"
    if os.environ.get("HASHAUDIT_CACHE_DIR") is None and _writable(package_cache):
        return None
    base = os.environ.get("HASHAUDIT_CACHE_DIR") or os.path.join(
        os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache"), "hashaudit"
    )
    for candidate in (Path(base) / "numba", Path(tempfile.gettempdir()) / f"hashaudit-numba-{os.getuid()}"):
        if _writable(candidate):
            os.environ["NUMBA_CACHE_DIR"] = str(candidate)
            try:  # numba already imported by the host program: set the live config too
                import sys

                if "numba" in sys.modules:
                    sys.modules["numba"].config.CACHE_DIR = str(candidate)
            except Exception:  # pragma: no cover - defensive
                pass
            return str(candidate)
    return None


configure_numba_cache()
