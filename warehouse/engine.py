"""Which engine does the heavy reading of `rollup`, `size` and `correlate`: DuckDB here, or Spark.

DuckDB (embedded) is the default. `Engine("spark", master)` sends the reading to a Spark cluster
(warehouse/spark/); planning, statistics and writes stay in this process either way.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

from warehouse.correlate import CorrelateRequest
from warehouse.errors import WarehouseError
from warehouse.home import Warehouse
from warehouse.rollup import RollupRequest
from warehouse.sizing import SizeRequest

ENGINES = ("duckdb", "spark")
DEFAULT_MASTER = "local[*]"


@dataclass(frozen=True)
class Engine:
    name: str = "duckdb"
    master: str = DEFAULT_MASTER

    def __post_init__(self) -> None:
        if self.name not in ENGINES:
            raise WarehouseError(f"unknown engine {self.name!r}: use duckdb or spark")

    @property
    def spark(self) -> bool:
        return self.name == "spark"

    def session(self) -> Any:
        from warehouse.spark.session import spark_session
        return spark_session(self.master)


def size(wh: Warehouse, req: SizeRequest, engine: Engine) -> dict[str, Any]:
    if engine.spark:
        from warehouse.spark.analysis import size_selector as on_spark
        return on_spark(wh, req, engine.session())
    from warehouse.sizing import size_selector
    return size_selector(wh, req)


def correlate(wh: Warehouse, req: CorrelateRequest, engine: Engine) -> dict[str, Any]:
    """Target-vs-all on either engine; --pairs on DuckDB only."""
    if engine.spark:
        from warehouse.spark.analysis import correlate_target as on_spark, refuse
        refuse(req)
        return on_spark(wh, req, engine.session())
    from warehouse.correlate import correlate_pairs, correlate_target
    return correlate_pairs(wh, req) if req.pairs else correlate_target(wh, req)


def rollup(home: Path, req: RollupRequest, engine: Engine) -> list[dict[str, Any]]:
    from warehouse.rollup import rollup as run
    if engine.spark:
        from warehouse.spark.rollup import compute_plan
        compute = compute_plan(engine.session())
        summaries = run(home, req, compute=compute)
        return [dict(s, cautions=compute.cautions(s["period"])) for s in summaries]
    return run(home, req)
