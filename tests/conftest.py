"""Fixtures shared by several test files."""

from __future__ import annotations

import json
from pathlib import Path
from types import SimpleNamespace

import pytest

import varstar
from varstar.simulate import demo_files


@pytest.fixture(scope="session")
def demo_data(tmp_path_factory) -> SimpleNamespace:
    """The shipped demo's files (invented field, fixed seed) in a folder, with the target's truth."""
    folder = tmp_path_factory.mktemp("demo-data")
    for name, text in demo_files().items():
        (folder / name).write_text(text, encoding="utf-8")
    truth = json.loads((folder / "truth.json").read_text())["target"]
    return SimpleNamespace(folder=folder, nights=sorted(folder.glob("night-*.csv")), truth=truth)


@pytest.fixture(scope="session")
def demo_archive_path(demo_data, tmp_path_factory) -> Path:
    """An archive of all six demo nights (copy it before changing it)."""
    path = tmp_path_factory.mktemp("demo-archive") / "demo.h5"
    varstar.create_archive(path, varstar.read_target(demo_data.folder / "target.toml"))
    varstar.ingest(path, demo_data.nights)
    return path
