"""Shared by every test folder: this folder is on ``sys.path`` (pytest puts a root conftest's folder there), so
``cli_runner`` imports from anywhere under tests/."""
