"""Gate a hash function on your own keys from a test suite: :func:`assert_uniform` raises ``AssertionError`` with
the plain-language failing findings, and returns quietly otherwise.

Importing this module loads neither numpy nor numba: everything heavy is imported when the function is called.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Iterable, Sequence
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import numpy as np

    from hashaudit.engine.plan import AuditPlan
    from hashaudit.keys.batch import KeyBatch
    from hashaudit.keys.options import SourceOptions
    from hashaudit.verdict.findings import Finding
    from hashaudit.verdict.result import AuditResult

__all__ = ["UniformityError", "assert_uniform"]

_VERDICTS = ("fail", "warn", "info")
_INT_MIN, _INT_MAX = -(1 << 63), (1 << 64) - 1  # the range ``--key-format int`` accepts
_MASK64 = (1 << 64) - 1
_SHOWN_LINES = 50  # failing findings written into the message; the rest are counted


class UniformityError(AssertionError):
    """Raised by :func:`assert_uniform`: the message lists the failing findings, one line each.

    Attributes
    ----------
    result : AuditResult
        The whole audit (``result.to_dataframe()`` has every finding, passes included).
    findings : list of Finding
        The findings that failed the assertion, worst first.
    """

    def __init__(self, message: str, result: AuditResult, findings: list[Finding]) -> None:
        super().__init__(message)
        self.result = result
        self.findings = findings


def assert_uniform(
    keys: Any,
    hash: str | Sequence[str] = "xxh3_64",
    *,
    buckets: int | str | Sequence[int | str] | None = None,
    scheme: str | Sequence[str] = "mask",
    checks: str | Sequence[str] | None = None,
    seed: int = 0,
    alpha: float | None = None,
    fail_on: str | Sequence[str] = ("fail",),
    options: SourceOptions | None = None,
    threads: int = 0,
    **settings: Any,
) -> AuditResult:
    """Assert that a hash function spreads these keys the way simple uniform hashing predicts.

    Runs :func:`hashaudit.audit` (or :func:`hashaudit.audit_batches` for keys in memory) and raises when a check
    comes out with a verdict in ``fail_on``. With the default ``fail_on=("fail",)`` only a ``fail`` — a departure
    that is significant after Holm's correction across the whole audit *and* whose effect, in operational units
    (extra probes, hottest bucket…), exceeds its threshold — fails the assertion; ``warn`` (significant but
    small) and ``info`` (more even than random: harmless for a table) pass silently.

    Parameters
    ----------
    keys : iterable, path, numpy.ndarray or pyarrow array
        The keys, one of:

        - an iterable of ``str`` (encoded as UTF-8) and ``bytes``, or of ``int`` (each hashed as its 8-byte
          little-endian word, negative ones as their 64-bit two's complement, the way ``--key-format int`` does;
          the range is -2^63 to 2^64 - 1); integers and text cannot be mixed;
        - a path (``str`` or ``os.PathLike``) to a key file, or a database URL, read by hashaudit's own readers
          with ``options``; a plain ``str`` is always a path, so pass ``[text]`` for a single key;
        - a 1-d NumPy array: integers as above, without a Python object per key; ``str_`` / ``bytes_`` arrays
          as text and bytes; object arrays as an iterable; a pandas Series or Index through its NumPy array;
        - a pyarrow ``Array`` or ``ChunkedArray`` without nulls: ``string``/``binary`` (large or not, or
          dictionary-encoded) read in place, integers as above.

    hash : str or sequence of str
        Registered hash names (``hashaudit hashes`` lists them) or ``module:function`` references; each is audited
        and any of them can fail the assertion.
    buckets : int, str or sequence of them, optional
        Table sizes (``65536``, ``"2^16"``, ``"64k"``); default: derived from the number of keys.
    scheme : str or sequence of str
        How a hash value becomes a bucket: ``mask`` (the low bits; the default, as in most hash tables),
        ``high``, ``mod`` or ``range``.
    checks : str or sequence of str, optional
        Check groups or check names (``"buckets"``, ``["buckets", "bits"]``, ``"all"``); default: the groups the
        command line runs by default.
    seed : int
        Seed of seeded hashes and of every simulation and sample: a fixed seed gives the same verdict every run.
    alpha : float, optional
        Family-wise error rate of the whole audit (default: the declared default threshold).
    fail_on : str or sequence of str
        The verdicts that fail the assertion; must include ``"fail"``. ``("fail", "warn")`` also fails on
        significant but small departures; adding ``"info"`` also fails on counts more even than random.
    options : SourceOptions, optional
        How a key file's records become keys (``SourceOptions(key_format="int")``, a column…); only for a path.
    threads : int
        Hashing threads; 0 = one per core. The verdict does not depend on it.
    **settings
        Any other :class:`hashaudit.AuditPlan` setting by name (``avalanche_keys=512``, ``all_keys=True``,
        ``thresholds=Thresholds(...)``).

    Returns
    -------
    AuditResult
        The audit, when no finding has a verdict in ``fail_on``.

    Raises
    ------
    UniformityError
        A subclass of ``AssertionError``: one line per failing finding (verdict, hash, table, check and its
        plain-language sentence), worst first; ``.result`` holds the whole audit.
    TypeError
        Keys of a kind that is not accepted (a single ``bytes`` object, floats, ``None``, integers mixed with
        text), or a setting given twice.
    ValueError
        No keys, an integer out of range, a null in an Arrow array, an array that is not one-dimensional, text
        that cannot be encoded as UTF-8, or a setting that cannot work (unknown hash, ``mask`` with a table size
        that is not a power of two, …).
    FileNotFoundError
        A path that names no file.

    Examples
    --------
    >>> import numpy as np
    >>> from hashaudit.testing import assert_uniform
    >>> ids = np.arange(0, 4096 * 1024, 1024, dtype=np.uint64)  # ids with a stride of 1024
    >>> assert_uniform(ids, "xxh3_64", buckets=4096, checks="buckets")  # doctest: +SKIP
    >>> assert_uniform(ids, "identity", buckets=4096, checks="buckets")  # doctest: +SKIP
    Traceback (most recent call last):
    hashaudit.testing.UniformityError: ...
    """
    __tracebackhide__ = True  # pytest shows the caller's line, not this function's
    failing = _failing_verdicts(fail_on)
    for name, instead in (("hashes", "hash"), ("schemes", "scheme")):
        if name in settings:
            raise TypeError(f"assert_uniform: give {instead}=, not {name}=")
    if alpha is not None and "thresholds" in settings:
        raise TypeError("assert_uniform: give alpha= or thresholds=, not both")

    source, batches = _keys_to_source(keys, options)
    plan = _plan(hash, buckets, scheme, checks, seed, alpha, settings)

    import hashaudit.hashes  # noqa: F401  (registers the statistics' default key fingerprints)

    if source is not None:
        from hashaudit.engine.sources import audit

        result = audit([source], plan, options, threads=threads, figures=False)
    else:
        from hashaudit.engine.runner import audit_batches

        chunks = batches or []
        total = sum(len(b) for b in chunks)
        result = audit_batches(chunks, plan, keys=total, threads=threads, reopen=lambda: iter(chunks), figures=False)

    bad = [f for f in result.findings if f.verdict in failing]
    if bad:
        raise UniformityError(_message(result, bad, failing), result, bad)
    return result


def _failing_verdicts(fail_on: str | Sequence[str]) -> frozenset[str]:
    """The verdicts that fail the assertion, checked."""
    chosen = (fail_on,) if isinstance(fail_on, str) else tuple(fail_on)
    unknown = [v for v in chosen if v not in _VERDICTS]
    if unknown:
        raise ValueError(f"assert_uniform: fail_on takes verdicts among {', '.join(_VERDICTS)}, not {unknown[0]!r}")
    if "fail" not in chosen:
        raise ValueError(f"assert_uniform: fail_on must include 'fail' (got {chosen!r})")
    return frozenset(chosen)


def _plan(
    hash: str | Sequence[str],
    buckets: int | str | Sequence[int | str] | None,
    scheme: str | Sequence[str],
    checks: str | Sequence[str] | None,
    seed: int,
    alpha: float | None,
    settings: dict[str, Any],
) -> AuditPlan:
    """The audit plan, every bad setting turned into a ``ValueError`` that names it."""
    import numbers

    from hashaudit.checks import Thresholds
    from hashaudit.engine.plan import AuditPlan
    from hashaudit.errors import UsageError

    hashes = (hash,) if isinstance(hash, str) else tuple(hash) if isinstance(hash, Iterable) else ()
    if not hashes or not all(isinstance(h, str) for h in hashes):
        raise TypeError(f"assert_uniform: hash must be a name or a sequence of names, not {hash!r}")
    sizes = None if buckets is None else (buckets,) if isinstance(buckets, int | str) else tuple(buckets)
    schemes = (scheme,) if isinstance(scheme, str) else tuple(scheme)
    if isinstance(seed, bool) or not isinstance(seed, numbers.Integral):
        raise TypeError(f"assert_uniform: seed must be an int, not {seed!r}")
    seed = int(seed)
    try:
        if alpha is not None:
            settings = {**settings, "thresholds": Thresholds(alpha=alpha)}
        plan = AuditPlan(hashes=hashes, buckets=sizes, schemes=schemes, checks=checks, seed=seed, **settings)
        from hashaudit.hashes.registry import REGISTRY

        for name in plan.hashes:
            REGISTRY.get(name)  # an unknown name is said now, before any key is read
    except UsageError as exc:
        raise ValueError(f"assert_uniform: {exc}") from exc
    return plan


def _keys_to_source(keys: Any, options: SourceOptions | None) -> tuple[str | None, list[KeyBatch] | None]:
    """A path to read, or the keys as batches in memory."""
    if isinstance(keys, str | os.PathLike):
        return _path(keys), None
    if options is not None:
        raise TypeError("assert_uniform: options= only applies to keys read from a file (a path)")
    if isinstance(keys, bytes | bytearray | memoryview):
        raise TypeError(
            "assert_uniform: keys is a single bytes object; pass a list of keys (e.g. [key]) or a path as str"
        )
    batch = _batch(keys)
    if len(batch) == 0:
        raise ValueError("assert_uniform: no keys to audit")
    from hashaudit.keys.options import SourceOptions

    step = SourceOptions().batch_keys
    return None, [batch.slice(start, min(start + step, len(batch))) for start in range(0, len(batch), step)]


def _path(keys: str | os.PathLike[Any]) -> str:
    """A key file (or a database URL) to read with hashaudit's readers."""
    text = os.fspath(keys)
    if isinstance(text, bytes):
        text = os.fsdecode(text)
    from hashaudit.keys.sql import is_database

    if is_database(text) and not os.path.isfile(text) and "://" in text:
        return text
    if not os.path.exists(text):
        hint = f" (a str is read as a path; pass [{text!r}] to audit one key)" if isinstance(keys, str) else ""
        raise FileNotFoundError(f"assert_uniform: no such key file: {text!r}{hint}")
    if not os.path.isfile(text):
        raise ValueError(f"assert_uniform: {text!r} is not a regular file")
    return text


def _batch(keys: Any) -> KeyBatch:
    """Keys in memory as one batch; arrays without a Python object per key."""
    import numpy as np

    pyarrow = sys.modules.get("pyarrow")  # an Arrow array can only exist once pyarrow is loaded
    if pyarrow is not None and isinstance(keys, pyarrow.Array | pyarrow.ChunkedArray):
        return _from_arrow(keys)
    pandas = sys.modules.get("pandas")
    if pandas is not None and isinstance(keys, pandas.Series | pandas.Index):
        keys = keys.to_numpy()
    if isinstance(keys, np.ndarray):
        return _from_numpy(keys)
    if not isinstance(keys, Iterable):
        raise TypeError(
            f"assert_uniform: keys must be an iterable of str, bytes or int, a path, or a NumPy or Arrow array; "
            f"not {type(keys).__name__}"
        )
    return _from_iterable(keys)


def _from_numpy(array: np.ndarray) -> KeyBatch:
    import numpy as np

    from hashaudit.keys.batch import KeyBatch

    if array.ndim != 1:
        raise ValueError(f"assert_uniform: a key array must be one-dimensional, not of shape {array.shape}")
    kind = array.dtype.kind
    if kind == "i":
        return KeyBatch.from_uint64(array.astype(np.int64, copy=False).view(np.uint64))
    if kind == "u":
        return KeyBatch.from_uint64(array.astype(np.uint64, copy=False))
    if kind in "US":
        import pyarrow as pa

        return KeyBatch.from_arrow(pa.array(array))
    if kind == "O":
        return _from_iterable(array.tolist())
    raise TypeError(
        f"assert_uniform: keys of dtype {array.dtype} are not accepted; give integers (hashed as 8-byte words), "
        "text or bytes"
    )


def _from_arrow(array: Any) -> KeyBatch:
    import numpy as np
    import pyarrow as pa

    from hashaudit.keys.batch import KeyBatch

    if array.null_count:
        nulls = array.null_count
        raise ValueError(
            f"assert_uniform: the Arrow array has {nulls:,} null{'' if nulls == 1 else 's'}; drop them first"
        )
    if isinstance(array, pa.ChunkedArray):
        chunks = [_from_arrow(chunk) for chunk in array.chunks if len(chunk)]
        return KeyBatch.concat(chunks) if chunks else KeyBatch.from_keys([])
    if pa.types.is_dictionary(array.type):
        array = array.dictionary_decode()
    kind = array.type
    if pa.types.is_string(kind) or pa.types.is_large_string(kind) or pa.types.is_binary(kind):
        return KeyBatch.from_arrow(array)
    if pa.types.is_large_binary(kind):
        return KeyBatch.from_arrow(array)
    if pa.types.is_integer(kind):
        return _from_numpy(np.asarray(array.to_numpy(zero_copy_only=False)))
    raise TypeError(
        f"assert_uniform: Arrow arrays of type {kind} are not accepted; give string, binary or integer arrays"
    )


def _from_iterable(keys: Iterable[Any]) -> KeyBatch:
    """Python keys: all text and bytes, or all integers (each checked once, then encoded once)."""
    import numbers

    import numpy as np

    from hashaudit.keys.batch import KeyBatch

    encoded: list[bytes] = []
    integers: list[int] = []
    for index, key in enumerate(keys):
        if isinstance(key, str):
            try:
                encoded.append(key.encode("utf-8"))
            except UnicodeEncodeError as exc:
                raise ValueError(f"assert_uniform: key {index} cannot be encoded as UTF-8 ({exc.reason})") from None
        elif isinstance(key, bytes | bytearray | memoryview):
            encoded.append(bytes(key))
        elif isinstance(key, numbers.Integral) and not isinstance(key, bool | np.bool_):
            value = int(key)
            if not _INT_MIN <= value <= _INT_MAX:
                raise ValueError(f"assert_uniform: integer key {index} is out of range [-2^63, 2^64-1]: {value}")
            integers.append(value & _MASK64)
        else:
            raise TypeError(
                f"assert_uniform: key {index} is a {type(key).__name__} ({key!r:.40}); keys are str, bytes or int"
            )
        if encoded and integers:
            raise TypeError(
                f"assert_uniform: key {index} mixes integers with text or bytes; give one kind "
                "(integers are hashed as 8-byte words, text as its UTF-8 bytes)"
            )
    if integers:
        return KeyBatch.from_uint64(np.fromiter(integers, dtype=np.uint64, count=len(integers)))
    return KeyBatch.from_keys(encoded)


def _message(result: AuditResult, bad: list[Finding], failing: frozenset[str]) -> str:
    """The assertion's text: a head line, then one line per failing finding."""
    names = ", ".join(h.name for h in result.hashes)
    verdicts = " or ".join(v for v in _VERDICTS if v in failing)
    plural = "" if len(bad) == 1 else "s"
    head = f"hashaudit: {len(bad)} finding{plural} with verdict {verdicts} for {names} on {result.keys:,} keys"
    width_hash = max(len(f.hash_name) for f in bad[:_SHOWN_LINES])
    width_table = max(len(f.table) for f in bad[:_SHOWN_LINES])
    lines = [head]
    for f in bad[:_SHOWN_LINES]:
        lines.append(
            f"  {f.verdict.upper():<4}  {f.hash_name:<{width_hash}}  {f.table:<{width_table}}  {f.check}: {f.message}"
        )
    if len(bad) > _SHOWN_LINES:
        lines.append(f"  … and {len(bad) - _SHOWN_LINES:,} more (the exception's .result has every finding)")
    return "\n".join(lines)
