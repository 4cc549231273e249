"""Keep tests away from the user's files and environment."""
from __future__ import annotations

from pathlib import Path

import pytest

DATA = Path(__file__).parent / "data"


@pytest.fixture(autouse=True)
def _isolated(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    monkeypatch.delenv("WAREHOUSE_HOME", raising=False)
    monkeypatch.setenv("WAREHOUSE_LOCK_WAIT", "2")
    monkeypatch.chdir(tmp_path)


@pytest.fixture
def home(tmp_path: Path) -> Path:
    from warehouse.home import init_home
    root = tmp_path / "wh"
    init_home(root, zone="Europe/Berlin")
    return root
