"""Hash functions: the registry and its batch kernels.

Importing the package imports :mod:`hashaudit.hashes.fingerprint` (light: it loads no kernel), which provides the
statistics with their default key fingerprints and sampling priorities (see ``hashaudit.stats._hooks``).
"""

from hashaudit.hashes import fingerprint  # noqa: F401  (imported for what it provides to the statistics)
