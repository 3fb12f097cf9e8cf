"""The README's JavaScript push runs as printed, with node's own fetch, against a real server."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
from pathlib import Path

import httpx
import pytest

README = Path(__file__).resolve().parents[2] / "README.md"


def _readme_example() -> str:
    text = README.read_text(encoding="utf-8")
    section = text.split("## Pushing from another language", 1)[1].split("\n## ", 1)[0]
    blocks = re.findall(r"```javascript\n(.*?)```", section, flags=re.S)
    assert len(blocks) == 1, "the section holds one JavaScript example"
    return blocks[0]


@pytest.mark.server
def test_the_readme_javascript_push_stores_an_assessment_once(live_server, tmp_path):
    node = shutil.which("node") or shutil.which("nodejs")
    if node is None:
        if os.environ.get("CI"):
            pytest.fail("CI must run the JavaScript push: install Debian's nodejs package")
        pytest.skip("node is not installed (`apt-get install nodejs`)")
    script = tmp_path / "push.js"
    script.write_text(_readme_example(), encoding="utf-8")
    env = {**os.environ, "FOLDWISE_URL": live_server.url, "FOLDWISE_KEY": live_server.write_key}
    ran = subprocess.run([node, str(script)], capture_output=True, text=True, env=env, timeout=120)
    assert ran.returncode == 0, ran.stderr
    first, second = ran.stdout.strip().splitlines()
    assert first.startswith("201 true ") and second.startswith("200 false ")
    url = first.split()[-1]
    uuid = url.rsplit("/", 1)[-1]
    stored = httpx.get(f"{live_server.url}/api/assessments/{uuid}").json()
    assert stored["name"] == "knn on an invented example" and len(stored["configurations"]) == 2
    winners = httpx.get(f"{live_server.url}/api/assessments/{uuid}/winners").json()
    assert [row["config"] for row in winners] == ['knn:{"n_neighbors":5}'] * 2
    # the winners' inner means as the script's formula gives them: 0.8 + 0.01 * outer fold + 0.0025
    assert [row["inner_mean"] for row in winners] == pytest.approx([0.8025, 0.8125])


def test_without_a_key_the_readme_push_is_told_which_header(live_server):
    refused = httpx.post(f"{live_server.url}/api/assessments", json={})
    assert refused.status_code == 401
    assert "Authorization: Bearer" in refused.json()["detail"][0]["msg"]
