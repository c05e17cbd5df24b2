"""Start the real service (`seqaudit serve`, uvicorn) as a child process for a test."""
from __future__ import annotations

import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import httpx2

# A plan that cannot decide within a test's few hundred balanced units (risks 1e-6, outcomes
# half and half), so every distinct record stays evidence and the cycle's count must equal
# the records stored.
BALANCED_CONFIG = """
[plans.balanced]
p0 = 0.45
p1 = 0.55
alpha = 0.000001
beta = 0.000001
"""


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class LiveServer:
    def __init__(self, db: Path, workers: int = 1, port: int | None = None, log: Path | None = None,
                 config: Path | None = None):
        self.db, self.workers, self.config = Path(db), workers, config
        self.port = port or free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.log = log or self.db.with_suffix(".log")
        self.proc: subprocess.Popen | None = None

    def start(self, timeout: float = 60.0) -> "LiveServer":
        exe = shutil.which("seqaudit")
        cmd = [exe] if exe else [sys.executable, "-m", "service.cli"]
        cmd += ["serve", "--db", str(self.db), "--port", str(self.port),
                "--workers", str(self.workers)]
        if self.config is not None:
            cmd += ["--config", str(self.config)]
        env = {k: v for k, v in os.environ.items() if not k.startswith("SEQAUDIT_")}
        self._log_fh = open(self.log, "ab")
        self.proc = subprocess.Popen(cmd, stdout=self._log_fh, stderr=subprocess.STDOUT, env=env,
                                     start_new_session=True)
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"server exited early: {self.log.read_text()[-2000:]}")
            try:
                if httpx2.get(self.url + "/healthz", timeout=1.0).status_code == 200:
                    return self
            except httpx2.TransportError:
                pass
            time.sleep(0.1)
        self.stop()
        raise RuntimeError(f"server did not answer within {timeout}s: {self.log.read_text()[-2000:]}")

    def stop(self, sig=signal.SIGTERM, timeout: float = 20.0) -> None:
        if self.proc and self.proc.poll() is None:
            os.killpg(self.proc.pid, sig)
            try:
                self.proc.wait(timeout)
            except subprocess.TimeoutExpired:
                os.killpg(self.proc.pid, signal.SIGKILL)
                self.proc.wait(timeout)
        if getattr(self, "_log_fh", None):
            self._log_fh.close()

    def __enter__(self):
        return self.start()

    def __exit__(self, *exc):
        self.stop()


def quiet_config(folder: Path) -> Path:
    """The repository's configuration with the scheduler off, written into ``folder``."""
    from service.settings import DEFAULT_CONFIG
    text = DEFAULT_CONFIG.read_text(encoding="utf-8")
    text = text.replace("enabled = true", "enabled = false")
    text = text.replace('backup_dir = "data/backups"', f'backup_dir = "{folder / "backups"}"')
    out = folder / "seqaudit-test.toml"
    out.write_text(text, encoding="utf-8")
    return out
