"""`make demo` and `make serve` listen where PORT says, and the demo prints that address."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest

from app.cli.demo import serve_hint

ROOT = Path(__file__).resolve().parent.parent


@pytest.mark.skipif(shutil.which("make") is None, reason="make is not installed")
@pytest.mark.parametrize("target", ["demo", "serve"])
def test_port_variable_reaches_the_server(target):
    # -n prints the commands without running them (an install step, if due, is printed too).
    plan = subprocess.run(
        ["make", "-n", target, "PORT=8001"], cwd=ROOT, capture_output=True, text=True,
        check=True,
    ).stdout
    assert "spatline serve --host 127.0.0.1 --port 8001" in plan
    if target == "demo":
        assert "spatline demo --port 8001" in plan
    default = subprocess.run(
        ["make", "-n", target], cwd=ROOT, capture_output=True, text=True, check=True
    ).stdout
    assert "--port 8000" in default


def test_demo_hint_names_the_port_and_the_mail_link_setting():
    same = serve_hint(port=8000, public_url="http://127.0.0.1:8000")
    assert same == [
        "Serve with `spatline serve --port 8000` (`make demo PORT=8000` does it): "
        "http://127.0.0.1:8000, API docs at http://127.0.0.1:8000/docs."
    ]
    other = serve_hint(port=8001, public_url="http://127.0.0.1:8000")
    assert "http://127.0.0.1:8001/docs" in other[0]
    assert "SPATLINE_PUBLIC_URL" in other[1] and "http://127.0.0.1:8001" in other[1]
