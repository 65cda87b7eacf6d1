"""A non-editable install ships everything the service reads as files, and migrates.

The wheel is built from a copy of the source (so no build/ or egg-info lands in the
checkout), unpacked into a directory of its own, and `spatline migrate` is run from
there with the working directory outside the source tree.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
SOURCE_PATHS = ("pyproject.toml", "README.md", "app", "chemistry", "demo", "migrations")

# pip fetches the build backend into an isolated environment (from the package index):
# ten seconds and more, so the module counts as slow.
pytestmark = pytest.mark.slow


def _files_under(relative: str) -> set[str]:
    """Tracked-looking files of a source directory, as wheel member names."""
    return {
        path.relative_to(ROOT).as_posix()
        for path in (ROOT / relative).rglob("*")
        if path.is_file() and "__pycache__" not in path.parts
    }


@pytest.fixture(scope="module")
def wheel(tmp_path_factory: pytest.TempPathFactory) -> Path:
    source = tmp_path_factory.mktemp("source")
    for name in SOURCE_PATHS:
        origin = ROOT / name
        if origin.is_dir():
            shutil.copytree(origin, source / name, ignore=shutil.ignore_patterns("__pycache__"))
        else:
            shutil.copy2(origin, source / name)
    out = tmp_path_factory.mktemp("wheelhouse")
    subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "--quiet", "-w", str(out), "."],
        cwd=source,
        check=True,
        capture_output=True,
        text=True,
    )
    (built,) = out.glob("spatline-*.whl")
    return built


@pytest.fixture(scope="module")
def members(wheel: Path) -> set[str]:
    with zipfile.ZipFile(wheel) as archive:
        return set(archive.namelist())


def test_wheel_carries_every_migration_file(members: set[str]) -> None:
    assert {"migrations/env.py", "migrations/script.py.mako"} <= members
    revisions = {name for name in _files_under("migrations/versions") if name.endswith(".py")}
    assert revisions, "the source tree has no migration revisions"
    assert revisions <= members


def test_wheel_carries_templates_static_files_and_chemistry_data(members: set[str]) -> None:
    for directory in ("app/templates", "app/static", "chemistry/data"):
        expected = _files_under(directory)
        assert expected, f"{directory} is empty in the source tree"
        assert expected <= members, f"missing from the wheel: {sorted(expected - members)}"
    assert "chemistry/bibliography.md" in members


def test_spatline_migrate_runs_from_the_unpacked_wheel_outside_the_source_tree(
    wheel: Path, tmp_path: Path
) -> None:
    installed = tmp_path / "site"
    with zipfile.ZipFile(wheel) as archive:
        archive.extractall(installed)
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    database = tmp_path / "installed.db"
    script = (
        "import json, sys\n"
        "import app, migrations\n"
        "from app.cli import main\n"
        "code = main(['migrate'])\n"
        "from app import migrate\n"
        "from app.settings import Settings\n"
        "print(json.dumps({'code': code, 'app': app.__file__, "
        "'migrations': migrations.__file__, "
        "'heads': list(migrate.current_heads(Settings()))}))\n"
    )
    environment = {
        key: value for key, value in os.environ.items() if not key.startswith("SPATLINE_")
    }
    environment.update(
        PYTHONPATH=str(installed),
        SPATLINE_DATABASE_URL=f"sqlite:///{database}",
        SPATLINE_ENVIRONMENT="development",
    )
    result = subprocess.run(
        [sys.executable, "-c", script],
        cwd=elsewhere,
        env=environment,
        check=True,
        capture_output=True,
        text=True,
    )
    report = json.loads(result.stdout.strip().splitlines()[-1])
    assert report["code"] == 0
    # The installed copy answered, not the checkout the test suite runs from.
    assert Path(report["app"]).is_relative_to(installed)
    assert Path(report["migrations"]).is_relative_to(installed)

    import sqlite3
    from contextlib import closing

    with closing(sqlite3.connect(database)) as connection:
        stored = {row[0] for row in connection.execute("SELECT version_num FROM alembic_version")}
        tables = {
            row[0]
            for row in connection.execute("SELECT name FROM sqlite_master WHERE type = 'table'")
        }
    assert report["heads"]
    assert stored == set(report["heads"])
    assert {"sites", "stations", "tanks", "readings"} <= tables
