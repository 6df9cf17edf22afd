"""Shared fixtures: where the helper modules live, and a writer of user modules."""

from __future__ import annotations

from pathlib import Path
from typing import Callable

import pytest

DATA_DIR = Path(__file__).parent / "data"


@pytest.fixture
def data_dir() -> Path:
    """Return the folder of helper modules the tests load as SPEC targets."""
    return DATA_DIR


@pytest.fixture
def write_module(tmp_path: Path) -> Callable[[str, str], Path]:
    """Return ``write(filename, source) -> path``, which writes a user module into ``tmp_path``."""

    def write(filename: str, source: str) -> Path:
        path = tmp_path / filename
        path.write_text(source, encoding="utf-8")
        return path

    return write
