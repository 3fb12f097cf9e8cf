"""The `foldwise` command on a real store."""

from __future__ import annotations

import argparse
import os
import socket
import subprocess
import sys

import httpx
import pytest

import foldwise
from foldwise import cli
from foldwise.cli import _number as _estimate_text
from foldwise.cli import main
from foldwise.client import save
from foldwise.running_server import find_running
from foldwise.store import db_url_from, make_engine


def test_list_shows_stored_assessments(db_path, small_assessment, capsys):
    make_engine(f"sqlite:///{db_path}").dispose()
    assert main(["list", "--db", str(db_path)]) == 0
    assert "no assessments" in capsys.readouterr().out
    small_assessment.save(str(db_path))
    assert main(["list", "--db", str(db_path)]) == 0
    out = capsys.readouterr().out
    assert small_assessment.uuid in out and small_assessment.name in out


def test_resend_with_an_empty_spool(tmp_path, capsys):
    assert main(["resend", "--spool", str(tmp_path / "spool")]) == 0
    assert "nothing spooled" in capsys.readouterr().out


# --- errors are messages, never tracebacks --------------------------------------------------------------

def _run(tmp_path, *args: str, cwd=None) -> subprocess.CompletedProcess:
    """`foldwise ...` as a person runs it, with a home and config folder of its own."""
    env = {"PATH": os.environ.get("PATH", "/usr/bin:/bin"), "HOME": str(tmp_path / "home"),
           "FOLDWISE_CONFIG": str(tmp_path / "config"), "XDG_DATA_HOME": str(tmp_path / "data")}
    return subprocess.run([sys.executable, "-m", "foldwise.cli", *args], capture_output=True, text=True,
                          timeout=120, env=env, cwd=cwd or tmp_path)


BAD_INPUT = {
    "mistyped path (list)": ["list", "--db", "runs/tpyo.db"],
    "mistyped path (check)": ["check", "--db", "runs/tpyo.db"],
    "mistyped path (backup)": ["backup", "copy.db", "--db", "runs/tpyo.db"],
    "mistyped path (serve)": ["serve", "--db", "runs/tpyo.db", "--port", "0"],
    "mistyped path (report)": ["report", "00000000-0000-4000-8000-000000000000", "--db", "runs/tpyo.db"],
    "default store missing": ["list"],
    "unknown dialect": ["list", "--db", "mysqlx://user@host/db"],
    "unparsable URL": ["check", "--db", "://"],
    "unreachable PostgreSQL": ["list", "--db", "postgresql+psycopg://127.0.0.1:1/foldwise"],
    "share a whole URL": ["share", "https://127.0.0.1:8000/assessments/x?metric=roc_auc"],
    "share with no server": ["share", "/"],
    "share to a bad --url": ["share", "/", "--url", "ftp:/nowhere"],
    "port not a number": ["serve", "--create", "--db", "s.db", "--port", "eighty"],
    "port too large": ["demo", "--port", "70000"],
    "revoke without an id": ["keys", "revoke"],
    "revoke an unknown id": ["keys", "revoke", "nope"],
    "unknown command": ["lsit"],
    "backup over a file": ["backup", "taken.db", "--db", "taken.db"],
}


@pytest.mark.parametrize("args", BAD_INPUT.values(), ids=BAD_INPUT.keys())
def test_bad_input_gets_a_message_and_a_nonzero_exit(tmp_path, args):
    (tmp_path / "taken.db").touch()
    result = _run(tmp_path, *args)
    assert result.returncode != 0
    assert "Traceback" not in result.stdout + result.stderr
    assert result.stderr.strip()  # a message, on stderr
    assert not (tmp_path / "runs").exists()  # a mistyped path creates nothing, not even its folder


def test_a_missing_store_is_named_with_the_default_and_the_demo(tmp_path):
    result = _run(tmp_path, "list")
    default = tmp_path / "data" / "foldwise" / "foldwise.db"
    assert result.returncode == 2
    assert f"no store at {default}" in result.stderr and "~/.local/share/foldwise/foldwise.db" in result.stderr
    assert ".foldwise/demo.db" in result.stderr and "serve --create" in result.stderr
    assert not default.exists()
    # In a checkout where `make demo` ran, the hint is the command to type.
    (tmp_path / ".foldwise").mkdir()
    (tmp_path / ".foldwise" / "demo.db").touch()
    assert "foldwise list --db .foldwise/demo.db" in _run(tmp_path, "list").stderr


def test_a_port_in_use_is_refused_by_name(tmp_path):
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen()
        port = taken.getsockname()[1]
        result = _run(tmp_path, "serve", "--create", "--db", "s.db", "--port", str(port))
    assert result.returncode == 2 and f"port {port} on 127.0.0.1 is in use" in result.stderr
    assert "Traceback" not in result.stderr


def test_version_and_help_for_every_subcommand_and_option(tmp_path):
    assert _run(tmp_path, "--version").stdout.strip() == f"foldwise {foldwise.__version__}"
    parser = cli._parser()
    commands = next(action for action in parser._actions if isinstance(action, argparse._SubParsersAction))
    assert set(commands.choices) == {"serve", "demo", "resend", "list", "keys", "share", "backup", "check",
                                    "report"}
    for name, sub in commands.choices.items():
        assert sub.description, name
        for action in sub._actions:
            assert action.help, f"{name} {action.option_strings or action.dest} has no help"


# --- the store must exist, and list reads plainly -------------------------------------------------------

def test_an_empty_default_store_points_at_the_demo(tmp_path, monkeypatch, capsys):
    monkeypatch.delenv("FOLDWISE_DB", raising=False)
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "data"))
    monkeypatch.chdir(tmp_path)
    make_engine(db_url_from(str(tmp_path / "data" / "foldwise" / "foldwise.db"))).dispose()
    assert main(["list"]) == 0
    out = capsys.readouterr().out
    assert "no assessments" in out and "(the default store)" in out and ".foldwise/demo.db" in out


def test_list_shows_a_missing_dataset_and_estimate_as_a_dash(db_path, small_assessment, capsys):
    payload = small_assessment.payload.model_copy(update={"dataset": None})
    save(payload, str(db_path))
    assert main(["list", "--db", str(db_path)]) == 0
    line = capsys.readouterr().out.strip()
    assert "[—]" in line and "nan" not in line.lower()
    assert _estimate_text(float("nan")) == "—" and _estimate_text(0.91234) == "0.9123"


# --- share finds the running server ----------------------------------------------------------------------

def test_serve_create_announces_itself_and_share_finds_its_port(tmp_path, capsys, monkeypatch, serving):
    server = serving(tmp_path / "new" / "s.db", tmp_path / "server.log")  # `serve --create`
    monkeypatch.setenv("FOLDWISE_CONFIG", str(server.config_dir))
    try:
        assert find_running(server.config_dir).url == server.url
        assert main(["share", "/?name=x"]) == 0
        link = capsys.readouterr().out.strip()
        assert link.startswith(f"{server.url}/?name=x&key=fw_r_")
        assert httpx.get(link, follow_redirects=True).status_code == 200  # the link opens the page
        assert main(["share", "/", "--host", "teamhost.example"]) == 0
        assert capsys.readouterr().out.startswith(f"http://teamhost.example:{server.port}/?key=")
        assert main(["share", "/", "--url", "http://10.0.0.7:9000"]) == 0
        assert capsys.readouterr().out.startswith("http://10.0.0.7:9000/?key=")
    finally:
        server.stop()
    assert not (server.config_dir / "server.json").exists()  # removed when the server stopped
    assert main(["share", "/"]) == 2
    assert "no running foldwise server" in capsys.readouterr().err
    assert main(["check", "--db", str(tmp_path / "new" / "s.db")]) == 0  # the store --create made
    assert "integrity: ok" in capsys.readouterr().out
