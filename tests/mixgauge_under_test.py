"""What every Python suite needs of the mixgauge binary under test: where it is, what to say
when it is missing, its version for the report header, a free loopback port, and a started
`mixgauge serve` process (:class:`ServeProcess`), which the suites use or extend.

The binary is ``$MIXGAUGE_BIN`` when set, else ``<repo>/target/release/mixgauge``. A missing
or non-executable binary is a failure that says how to build it; no test is ever skipped.

Each suite runs as its own pytest root (``python -m pytest tests/<suite>``), so each suite's
conftest.py puts this folder on ``sys.path`` before importing from here. A conftest that
imports the fixtures below (``mixgauge_binary``, ``demo_csv``) or the report header hook
(``pytest_report_header``) gets them as its own: pytest collects them from its namespace.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import time
from pathlib import Path

import pytest

REPO_ROOT = Path(__file__).resolve().parent.parent
DEFAULT_BINARY = REPO_ROOT / "target" / "release" / "mixgauge"
BUILD_HINT = (
    f"build it with `cd {REPO_ROOT} && cargo build --release -p mixgauge-cli`, "
    "or point MIXGAUGE_BIN at an existing binary"
)

#: The demo data (invented trailer telemetry, committed with its generator `mixgauge demo`):
#: a file any test may use where any data will do; never a source of expected values.
DEMO_CSV = REPO_ROOT / "demo-data" / "reefer-telemetry.csv"

#: Seconds the server may take to answer /readyz after it is started.
READY_TIMEOUT = 30


def binary_path() -> Path:
    return Path(os.environ.get("MIXGAUGE_BIN") or DEFAULT_BINARY)


def free_port() -> int:
    """A loopback port nobody listens on right now (the server binds it a moment later)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def program_version(path: Path) -> str:
    """What ``PATH --version`` prints, ``MISSING`` when there is no such file, or why it
    could not be run (for report headers: the fixtures report the same problem as a failure)."""
    if not path.is_file():
        return "MISSING"
    try:
        return subprocess.run(
            [str(path), "--version"], capture_output=True, text=True, timeout=30
        ).stdout.strip()
    except (OSError, subprocess.TimeoutExpired) as e:
        return f"not runnable: {e}"


def binary_version_line() -> str:
    """The report header line naming the binary under test and its version."""
    path = binary_path()
    return f"mixgauge binary: {path} ({program_version(path)})"


def require_binary() -> Path:
    """The binary's path; fails (never skips) with the build hint when it is missing or not
    executable."""
    path = binary_path()
    if not path.is_file():
        pytest.fail(f"mixgauge binary not found at {path}: {BUILD_HINT}", pytrace=False)
    if not os.access(path, os.X_OK):
        pytest.fail(f"mixgauge binary at {path} is not executable: {BUILD_HINT}", pytrace=False)
    return path


def pytest_report_header(config):
    return binary_version_line()


@pytest.fixture(scope="session")
def mixgauge_binary() -> Path:
    """The binary under test (see :func:`require_binary`)."""
    return require_binary()


@pytest.fixture(scope="session")
def demo_csv() -> Path:
    """:data:`DEMO_CSV`; fails with how to regenerate it when it is missing."""
    if not DEMO_CSV.is_file():
        pytest.fail(
            f"{DEMO_CSV} is missing: regenerate it with `mixgauge demo` (see DEVELOPERS.md)",
            pytrace=False,
        )
    return DEMO_CSV


def _requests():
    """The `requests` module, imported on first use: the suites that start a server list it in
    their requirements, the reference suite (CLI only) does not."""
    import requests

    return requests


class ServeProcess:
    """One `mixgauge serve` process on a free loopback port over ``data_dir``.

    ``start`` returns once ``GET /readyz`` answers ``{"status": "ready"}``; it tries another
    port when the server exits first (another process may grab the free port meanwhile) and
    fails the test when it never gets ready. The process can be killed (SIGKILL), stopped
    (SIGTERM) and started again over the same folder. ``args`` follow ``--listen`` and
    ``--data-dir``; ``env`` is the server's whole environment (the caller's when ``None``).
    Server output goes to ``log_path``, or to the file ``next_log_path`` gives at each start.
    """

    def __init__(
        self,
        binary: Path,
        data_dir: Path,
        log_path: Path | None,
        args=(),
        env: dict[str, str] | None = None,
    ):
        self.binary = binary
        self.data_dir = data_dir
        self.log_path = log_path
        self.args = list(args)
        self.env = env
        self.proc: subprocess.Popen | None = None
        self.port: int | None = None
        self.http = _requests().Session()

    @property
    def base(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def url(self, path: str) -> str:
        return self.base + path

    def next_log_path(self) -> Path:
        """The file the next start writes the server's output to (appended)."""
        return self.log_path

    def start(self) -> "ServeProcess":
        assert not self.running(), "server already running"
        last_error = None
        for _attempt in range(3):
            self.port = free_port()
            self.log_path = self.next_log_path()
            cmd = [
                str(self.binary), "serve",
                "--listen", f"127.0.0.1:{self.port}",
                "--data-dir", str(self.data_dir),
                *self.args,
            ]
            with open(self.log_path, "ab") as log:
                self.proc = subprocess.Popen(
                    cmd, stdout=log, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
                    env=self.env,
                )
            deadline = time.monotonic() + READY_TIMEOUT
            while time.monotonic() < deadline:
                if self.proc.poll() is not None:
                    last_error = f"server exited with {self.proc.returncode}:\n{self.log()}"
                    break
                try:
                    r = self.http.get(self.url("/readyz"), timeout=2)
                    if r.status_code == 200 and r.json() == {"status": "ready"}:
                        return self
                except _requests().RequestException:
                    pass
                time.sleep(0.05)
            else:
                self.kill()
                pytest.fail(f"server not ready within {READY_TIMEOUT} s:\n{self.log()}",
                            pytrace=False)
        pytest.fail(f"server did not start: {last_error}", pytrace=False)

    def log(self) -> str:
        """The last 4000 characters of the current start's output."""
        if self.log_path is None or not self.log_path.exists():
            return ""
        return self.log_path.read_text(errors="replace")[-4000:]

    def running(self) -> bool:
        return self.proc is not None and self.proc.poll() is None

    def kill(self) -> None:
        """SIGKILL: no chance to clean up."""
        if self.running():
            self.proc.send_signal(signal.SIGKILL)
            self.proc.wait(timeout=30)

    def stop(self) -> None:
        """SIGTERM, SIGKILL when it has not exited within 15 s; closes the HTTP session."""
        if self.running():
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                self.kill()
        self.http.close()
