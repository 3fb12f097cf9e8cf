"""A built wheel carries the templates, static files and migrations the server needs."""

from __future__ import annotations

import subprocess
import sys
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_wheel_ships_templates_static_and_migrations(tmp_path):
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--quiet", "-w", str(tmp_path), str(ROOT)],
                   check=True, capture_output=True)
    wheel = next(tmp_path.glob("foldwise-*.whl"))
    names = set(zipfile.ZipFile(wheel).namelist())
    for template in (ROOT / "templates").glob("*.html"):
        assert f"foldwise/templates/{template.name}" in names
    for asset in (ROOT / "static").iterdir():
        assert f"foldwise/static/{asset.name}" in names
    assert "foldwise/store/migrations/env.py" in names
    assert "foldwise/store/migrations/script.py.mako" in names
    assert any(name.startswith("foldwise/store/migrations/versions/0001") for name in names)
    assert not any(name.startswith(("app/", "tests/", "demo_data/")) for name in names)
