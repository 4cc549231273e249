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


@pytest.fixture(scope="session")
def demo_home(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The small demo scenario, loaded once for the analysis tests (read-only use only)."""
    from seed.generate import generate
    from warehouse.demo import DEMO_SOURCE, DEMO_ZONE
    from warehouse.home import init_home
    from warehouse.ingest.run import IngestOptions, ingest_files

    root = tmp_path_factory.mktemp("demo")
    home = root / "wh"
    init_home(home, zone=DEMO_ZONE)
    files = generate(root / "csv", scale="small")
    for machine in sorted({f.parent for f in files}):
        ingest_files(home, [f for f in files if f.parent == machine],
                     IngestOptions(source=DEMO_SOURCE, host=machine.name))
    return home
