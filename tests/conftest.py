"""Shared fixtures: a small real assessment, an app around a fresh SQLite file, a real uvicorn server."""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
from contextlib import contextmanager
from pathlib import Path

import httpx
import pytest
from fastapi.testclient import TestClient
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.tree import DecisionTreeClassifier

import foldwise
from foldwise.keys import KeyFile
from foldwise.settings import Settings
from foldwise.web.app import create_app


@pytest.fixture(scope="session")
def small_assessment():
    """A real nested CV on part of the bundled breast-cancer data: 2 families, 5 configurations."""
    X, y = load_breast_cancer(return_X_y=True)
    space = {
        "logistic": (make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)),
                     {"logisticregression__C": [0.05, 1.0]}),
        "tree": (DecisionTreeClassifier(random_state=0), {"max_depth": [1, 2, 3]}),
    }
    return foldwise.nested_cv(space, X[::2], y[::2], outer=3, inner=3, scoring=["roc_auc", "accuracy"],
                              n_jobs=1, progress=False, name="breast cancer, two families",
                              dataset="breast-cancer (scikit-learn bundled)")


@pytest.fixture
def db_path(tmp_path) -> Path:
    return tmp_path / "store.db"


@pytest.fixture
def open_client(tmp_path):
    """Opens a TestClient around the store at a URL, sending the app's write key as the push client would."""

    @contextmanager
    def opening(db_url: str):
        app = create_app(Settings(db_url=db_url, config_dir=tmp_path / "config"))
        with TestClient(app) as test_client:
            test_client.headers["authorization"] = f"Bearer {app.state.keys.ensure_write_key().secret}"
            yield test_client

    return opening


@pytest.fixture
def client(db_path, open_client):
    with open_client(f"sqlite:///{db_path}") as test_client:
        yield test_client


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


class LiveServer:
    """`foldwise serve` in its own process on loopback, as a person would start it."""

    def __init__(self, db_path: Path, log_path: Path, *extra: str, env: dict | None = None, port: int | None = None):
        self.port = port or free_port()
        self.url = f"http://127.0.0.1:{self.port}"
        self.db_path, self.config_dir = db_path, db_path.parent / "config"
        self._log = open(log_path, "w")
        self.process = subprocess.Popen(
            [sys.executable, "-m", "foldwise.cli", "serve", "--create", "--db", str(db_path), "--port", str(self.port),
             *extra],
            stdout=self._log, stderr=subprocess.STDOUT,
            env={**os.environ, "PYTHONWARNINGS": "ignore", "FOLDWISE_CONFIG": str(self.config_dir), **(env or {})})
        self._wait()
        self.write_key = KeyFile(self.config_dir / "keys.json").ensure_write_key().secret

    def _wait(self, timeout: float = 90.0) -> None:  # a loaded CI machine can take half a minute to start it
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self.process.poll() is not None:
                raise RuntimeError(f"the server exited with {self.process.returncode}")
            try:
                if httpx.get(self.url + "/healthz", timeout=1.0).status_code == 200:
                    return
            except httpx.TransportError:
                time.sleep(0.1)
        raise RuntimeError(f"the server did not answer on {self.url} within {timeout} s")

    def stop(self) -> None:
        self.process.terminate()
        try:
            self.process.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.process.kill()
        self._log.close()


@pytest.fixture
def serving():
    """``LiveServer`` itself, for a test that starts and stops a server of its own."""
    return LiveServer


@pytest.fixture
def unused_port() -> int:
    return free_port()


@pytest.fixture(scope="session")
def live_server(tmp_path_factory):
    """One real server for the session; the push client finds its write key in FOLDWISE_KEY."""
    folder = tmp_path_factory.mktemp("live")
    server = LiveServer(folder / "live.db", folder / "server.log")
    previous = os.environ.get("FOLDWISE_KEY")
    os.environ["FOLDWISE_KEY"] = server.write_key
    yield server
    server.stop()
    if previous is None:
        os.environ.pop("FOLDWISE_KEY", None)
    else:
        os.environ["FOLDWISE_KEY"] = previous


@pytest.fixture(scope="module")
def start_live_server():
    """Starts real servers on stores in folders the test module chooses (its config in folder/config, where
    the module may have put keys first); stops them after the module."""
    started = []

    def start(folder: Path) -> LiveServer:
        started.append(LiveServer(folder / "live.db", folder / "server.log"))
        return started[-1]

    yield start
    for server in started:
        server.stop()
