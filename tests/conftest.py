"""Shared by every test folder: this folder is on ``sys.path`` (pytest puts a root conftest's folder there), so
``cli_runner`` imports from anywhere under tests/."""

import os

# No warm-up helper process behind the command lines the tests run (in-process or in children): a fresh CI runner
# would otherwise start one per audit until the first kernels are cached. tests/engine/test_warmup.py turns it on.
os.environ.setdefault("HASHAUDIT_WARM_UP", "0")
