"""A throw-away JupyterLab server for browser tests: temp dirs, fixed token, nothing left running.

Settings follow the recipe the project's browser tests use: a fresh server with its own config,
runtime, settings and workspace folders, the default kernel started without asking, no news or
update checks, and ``window.jupyterapp`` exposed to the test page.
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import time
import urllib.request
from dataclasses import dataclass, field
from pathlib import Path

TOKEN = "debrief-browser-test"


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@dataclass
class LabServer:
    root: Path
    port: int
    process: subprocess.Popen
    log_path: Path
    kernel_pids: list = field(default_factory=list)  # kernels run in their own session: stopped apart

    @property
    def base_url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def url(self, path: str) -> str:
        return f"{self.base_url}/{path.lstrip('/')}?token={TOKEN}"

    def log(self) -> str:
        try:
            return self.log_path.read_text(encoding="utf-8", errors="replace")[-4000:]
        except OSError:
            return ""


def _write_json(path: Path, data) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps(data), encoding="utf-8")


def start_lab(root: Path, home: Path, *, extra_env: dict | None = None, timeout_s: float = 60.0) -> LabServer:
    """Start JupyterLab serving `root`; `home` holds its temporary config/runtime/settings dirs."""
    port = free_port()
    dirs = {k: home / k.lower() for k in ("JUPYTER_CONFIG_DIR", "JUPYTER_RUNTIME_DIR", "JUPYTERLAB_SETTINGS_DIR",
                                          "JUPYTERLAB_WORKSPACES_DIR", "IPYTHONDIR")}
    for d in dirs.values():
        d.mkdir(parents=True, exist_ok=True)
    _write_json(dirs["JUPYTER_CONFIG_DIR"] / "jupyter_server_config.json", {
        "ServerApp": {"ip": "127.0.0.1", "port": port, "port_retries": 0, "open_browser": False,
                      "allow_root": True, "root_dir": str(root)},
        "IdentityProvider": {"token": TOKEN},
        "LabApp": {"news_url": None, "check_for_updates_class": "jupyterlab.handlers.announcements.NeverCheckForUpdate",
                   "expose_app_in_browser": True},
    })
    settings = dirs["JUPYTERLAB_SETTINGS_DIR"]
    _write_json(settings / "@jupyterlab" / "notebook-extension" / "tracker.jupyterlab-settings", {"autoStartDefaultKernel": True})
    _write_json(settings / "@jupyterlab" / "apputils-extension" / "notification.jupyterlab-settings", {"fetchNews": "false"})
    env = dict(os.environ)
    env.update({k: str(v) for k, v in dirs.items()})
    env["JUPYTER_PLATFORM_DIRS"] = "1"
    env.update(extra_env or {})
    log_path = home / "lab.log"
    log = open(log_path, "wb")
    proc = subprocess.Popen([sys.executable, "-m", "jupyterlab", "--no-browser"], cwd=root, env=env,
                            stdout=log, stderr=subprocess.STDOUT, start_new_session=True)
    log.close()
    server = LabServer(root=root, port=port, process=proc, log_path=log_path)
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise RuntimeError(f"JupyterLab exited with {proc.returncode}:\n{server.log()}")
        try:
            with urllib.request.urlopen(f"{server.base_url}/api/status?token={TOKEN}", timeout=2) as r:
                if r.status == 200:
                    return server
        except OSError:
            time.sleep(0.3)
    stop_lab(server)
    raise RuntimeError(f"JupyterLab did not answer within {timeout_s} s:\n{server.log()}")


def stop_lab(server: LabServer) -> None:
    """Terminate the server and wait; then kill its process group (kernels it started)."""
    proc = server.process
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=5)
    # The server's session holds only what it started; a kernel that outlived the shutdown is
    # a session of its own (jupyter_client starts kernels with start_new_session).
    for pgid in [proc.pid, *server.kernel_pids]:
        try:
            os.killpg(pgid, signal.SIGKILL)
        except (ProcessLookupError, PermissionError):
            pass
