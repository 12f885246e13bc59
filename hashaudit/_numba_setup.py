"""Where numba keeps hashaudit's compiled kernels: one folder per machine user, shared by every install.

numba's own choice is the ``__pycache__`` folder beside each module, or a folder named after the module's absolute
path: either way a new virtualenv, a reinstall or a second checkout compiles every kernel again (about 20 s for a
default audit), and a read-only install cannot cache at all. hashaudit's kernels go instead to

    $HASHAUDIT_CACHE_DIR/numba/py<X.Y>-numba<version>/hashaudit/<subpackage>/

(``$HASHAUDIT_CACHE_DIR`` defaults to ``$XDG_CACHE_HOME/hashaudit``, that is ``~/.cache/hashaudit``;
``hashaudit-<uid>`` in the temporary folder when that cannot be written), named by the module's place *inside*
the package rather than by where the package is installed. numba stamps each cached kernel with a hash of its module's source and the CPU it
was compiled for, so any install of the same source on the same machine loads the kernels the first one compiled,
and a changed module compiles anew. Kernels of other packages keep numba's usual folders; a ``NUMBA_CACHE_DIR``
set by the user wins for every package, ours included.
"""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path
from typing import Any

PACKAGE = Path(__file__).resolve().parent


def _writable(path: Path) -> bool:
    try:
        path.mkdir(parents=True, exist_ok=True)
        probe = tempfile.NamedTemporaryFile(dir=path, delete=True)
        probe.close()
        return True
    except OSError:
        return False


def cache_root() -> Path | None:
    """hashaudit's cache folder: ``$HASHAUDIT_CACHE_DIR`` (default ``$XDG_CACHE_HOME/hashaudit``), else
    ``hashaudit-<uid>`` in the temporary folder; None when neither can be written. The kernels go to its
    ``numba`` folder, the null results of :mod:`hashaudit.stats._memo` to its ``nulls`` folder."""
    base = os.environ.get("HASHAUDIT_CACHE_DIR") or os.path.join(
        os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache"), "hashaudit"
    )
    for candidate in (Path(base), Path(tempfile.gettempdir()) / f"hashaudit-{os.getuid()}"):
        if _writable(candidate):
            return candidate
    return None


def cache_base() -> Path | None:
    """The folder that holds the kernel cache: ``numba`` in :func:`cache_root`; None when none can be written."""
    root = cache_root()
    return None if root is None else root / "numba"


def versions() -> str:
    import numba

    return f"py{sys.version_info[0]}.{sys.version_info[1]}-numba{numba.__version__}"


def _locator_class(base: Path) -> Any:
    """A numba cache locator for the modules of this package, rooted at ``base``."""
    from numba.core import caching

    root = base / versions()

    class PackageCacheLocator(caching._SourceFileBackedLocatorMixin, caching._CacheLocator):  # type: ignore[misc,name-defined]
        """Caches a hashaudit kernel under ``root`` by its module's path inside the package."""

        def __init__(self, py_func: Any, py_file: str) -> None:
            self._py_file = py_file
            self._lineno = py_func.__code__.co_firstlineno
            inside = Path(py_file).resolve().parent.relative_to(PACKAGE.parent)
            self._cache_path = str(root.joinpath(*inside.parts))

        def get_cache_path(self) -> str:
            return self._cache_path

        @classmethod
        def from_function(cls, py_func: Any, py_file: str) -> Any:
            try:
                Path(py_file).resolve().relative_to(PACKAGE)
            except (ValueError, OSError):
                return None  # not one of ours: numba's own locators decide
            return super().from_function(py_func, py_file)

    return PackageCacheLocator


def configure_numba_cache() -> str | None:
    """Send hashaudit's kernels to the per-user cache folder (see the module's text); returns the folder, or
    ``NUMBA_CACHE_DIR`` when the user set it, or None when no folder can be written (kernels then compile in
    every process)."""
    if os.environ.get("NUMBA_CACHE_DIR"):
        return os.environ["NUMBA_CACHE_DIR"]
    base = cache_base()
    if base is None:
        return None
    from numba.core import caching

    impl = getattr(caching, "CacheImpl", None) or getattr(caching, "_CacheImpl", None)  # renamed in numba 0.61
    classes = getattr(impl, "_locator_classes", None)
    if not isinstance(classes, list):  # a numba that locates caches some other way: its own folders then
        return None
    classes[:] = [c for c in classes if getattr(c, "__name__", "") != "PackageCacheLocator"]
    classes.insert(0, _locator_class(base))
    return str(base / versions())


def is_saved(kernel: Any) -> bool:
    """Whether numba's cache holds an index for ``kernel`` (a ``cache=True`` dispatcher), wherever it is kept."""
    try:
        return os.path.exists(kernel._cache._cache_file._index_path)
    except AttributeError:  # a numba that keeps its cache some other way: take it as kept, and guess nothing
        return True


def skip_blas_probe() -> None:
    """Import numba's array functions with scipy's BLAS hidden, unless one of them is imported already.

    When numba first compiles or loads a kernel it imports ``numba.np.arraymath``, which imports
    ``scipy.linalg.cython_blas`` to learn whether ``np.convolve`` and ``np.correlate`` of floats inside a kernel
    may call BLAS; that import of ``scipy.linalg`` was measured at 0.14-0.34 s of every audit. hashaudit's kernels
    call neither function (nor ``np.dot``, which asks again when it is compiled), so the probe is made to fail
    once: numba then takes its own loop for those two functions, and ``scipy.linalg`` imports as usual afterwards.
    """
    if "numba.np.arraymath" in sys.modules or "scipy.linalg.cython_blas" in sys.modules:
        return
    sys.modules["scipy.linalg.cython_blas"] = None  # type: ignore[assignment]  # an import of it raises ImportError
    try:
        import numba.np.arraymath  # noqa: F401
    finally:
        del sys.modules["scipy.linalg.cython_blas"]


configure_numba_cache()
skip_blas_probe()
