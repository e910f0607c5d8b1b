"""Suite-wide settings: the seed root of the statistical tests (see ``tests/seeds.py``)."""

from seeds import ENV, seed_root


def pytest_report_header(config):
    root = seed_root()
    return f"{ENV}: " + ("unset (default seeds)" if root is None else str(root))
