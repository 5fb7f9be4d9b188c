"""Fixtures of the cluster tests (``python -m pytest tests/cluster``): the binary under test
(``$MIXGAUGE_BIN`` or ``<repo>/target/release/mixgauge``) and the report header, shared with
the other suites through ``tests/mixgauge_under_test.py``. PostgreSQL is
``$MIXGAUGE_TEST_POSTGRES`` (default ``postgres://root@127.0.0.1:5432/test``)."""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from mixgauge_under_test import demo_csv, mixgauge_binary, pytest_report_header  # noqa: F401,E402
