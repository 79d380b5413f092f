"""A throwaway team tracking backend for the tests, started the way the README's recipe starts
one: a PostgreSQL cluster on a loopback port (its own folder, ``initdb`` + ``pg_ctl``; run as the
``postgres`` user when the tests run as root, since ``initdb`` refuses root) and ``mlflow server``
on it with proxied artifacts and MLflow's basic-auth app."""
from __future__ import annotations

import os
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

PG_BIN = Path("/usr/lib/postgresql/15/bin")
ADMIN, ADMIN_PASSWORD = "admin", "admin-password-for-tests"
SECRET = "a-secret-key-for-tests-only"


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def pg_tool(name: str) -> str | None:
    return str(PG_BIN / name) if (PG_BIN / name).is_file() else shutil.which(name)


def _as_postgres(cmd: list[str]) -> list[str]:
    return ["runuser", "-u", "postgres", "--", *cmd] if os.geteuid() == 0 else cmd


class Postgres:
    """A PostgreSQL cluster in a fresh folder on ``127.0.0.1:port`` with a database ``mlflow``
    (the folder sits directly in the system's temporary directory, which the ``postgres`` user
    can reach; a test's own temporary folders are private to it)."""

    def __init__(self):
        self.folder = Path(tempfile.mkdtemp(prefix="wsad-pg-"))
        self.port, self.data = free_port(), self.folder / "data"

    def start(self) -> Postgres:
        if os.geteuid() == 0:
            shutil.chown(self.folder, "postgres")
        subprocess.run(_as_postgres([pg_tool("initdb"), "-D", str(self.data), "-U", "postgres", "-A", "trust",
                                     "--no-sync"]), check=True, capture_output=True)
        subprocess.run(_as_postgres([pg_tool("pg_ctl"), "-D", str(self.data), "-l", str(self.folder / "pg.log"),
                                     "-w", "-o", f"-p {self.port} -k {self.folder} -c listen_addresses=127.0.0.1",
                                     "start"]), check=True, capture_output=True)
        subprocess.run(_as_postgres([pg_tool("createdb"), "-h", "127.0.0.1", "-p", str(self.port), "-U", "postgres",
                                     "mlflow"]), check=True, capture_output=True)
        return self

    @property
    def uri(self) -> str:
        # psycopg2 explicitly: a plain postgresql:// URI makes SQLAlchemy look for psycopg 3
        return f"postgresql+psycopg2://postgres@127.0.0.1:{self.port}/mlflow"

    def stop(self) -> None:
        subprocess.run(_as_postgres([pg_tool("pg_ctl"), "-D", str(self.data), "-m", "immediate", "stop"]),
                       capture_output=True)
        shutil.rmtree(self.folder, ignore_errors=True)


class MlflowServer:
    """``mlflow server`` with basic auth on a loopback port; ``stop()``/``start()`` make outages."""

    def __init__(self, backend_uri: str, folder: Path, auth: bool = True):
        self.backend, self.folder, self.auth = backend_uri, Path(folder), auth
        self.port, self.proc = free_port(), None
        self.folder.mkdir(parents=True, exist_ok=True)
        if auth:
            (self.folder / "auth.ini").write_text(
                "[mlflow]\ndefault_permission = READ\n"
                f"database_uri = sqlite:///{self.folder / 'auth.db'}\n"
                f"admin_username = {ADMIN}\nadmin_password = {ADMIN_PASSWORD}\n"
                "authorization_function = mlflow.server.auth:authenticate_request_basic_auth\n")

    @property
    def uri(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def start(self, timeout: float = 90) -> MlflowServer:
        # no background job runner: wsad runs none, and its seven consumer processes slow a 2-core start
        env = {**os.environ, "MLFLOW_FLASK_SERVER_SECRET_KEY": SECRET,
               "MLFLOW_AUTH_CONFIG_PATH": str(self.folder / "auth.ini"),
               "MLFLOW_SERVER_ENABLE_JOB_EXECUTION": "false"}
        cmd = [str(Path(sys.executable).with_name("mlflow")), "server", "--host", "127.0.0.1",
               "--port", str(self.port), "--backend-store-uri", self.backend,
               "--artifacts-destination", str(self.folder / "artifacts"), "--workers", "2"]
        if self.auth:
            cmd += ["--app-name", "basic-auth"]
        log = open(self.folder / "server.log", "ab")
        self.proc = subprocess.Popen(cmd, stdout=log, stderr=log, env=env, start_new_session=True)
        deadline = time.time() + timeout
        while time.time() < deadline:
            try:
                with urllib.request.urlopen(f"{self.uri}/health", timeout=2) as r:
                    if r.status == 200:
                        return self
            except OSError:
                time.sleep(0.3)
            if self.proc.poll() is not None:
                raise RuntimeError(f"mlflow server exited: {(self.folder / 'server.log').read_text()[-2000:]}")
        raise RuntimeError("mlflow server did not answer /health in time")

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGKILL)   # a crash, not a polite shutdown
            self.proc.wait()

    def create_user(self, name: str, password: str) -> None:
        """A user with EDIT permission by default on what it creates (through the admin)."""
        import mlflow.server.auth.client as auth_client

        old = {k: os.environ.get(k) for k in ("MLFLOW_TRACKING_USERNAME", "MLFLOW_TRACKING_PASSWORD")}
        os.environ["MLFLOW_TRACKING_USERNAME"], os.environ["MLFLOW_TRACKING_PASSWORD"] = ADMIN, ADMIN_PASSWORD
        try:
            auth_client.AuthServiceClient(self.uri).create_user(name, password)
        finally:
            for k, v in old.items():
                if v is None:
                    os.environ.pop(k, None)
                else:
                    os.environ[k] = v
