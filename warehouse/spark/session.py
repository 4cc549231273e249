"""Start (or reuse) the Spark session, with clear errors when Spark cannot run here."""
from __future__ import annotations

import os
import shutil
from pathlib import Path
from typing import Any

from warehouse.errors import WarehouseError

DEFAULT_MASTER = "local[*]"
APP_NAME = "counter-warehouse"


class SparkUnavailableError(WarehouseError):
    """--engine spark was asked for, but pyspark, Java or the cluster is not there."""


def _java() -> str | None:
    home = os.environ.get("JAVA_HOME")
    if home and (Path(home) / "bin" / "java").exists():
        return str(Path(home) / "bin" / "java")
    return shutil.which("java")


def spark_available() -> str | None:
    """None when Spark can start here, else the reason it cannot (one line)."""
    try:
        import pyspark  # noqa: F401
    except ImportError:
        return "pyspark is not installed: pip install 'counter-warehouse[spark]'"
    if _java() is None:
        return "Java is not installed (Spark needs a Java 17 or newer runtime): install a JRE, or set JAVA_HOME"
    return None


def spark_session(master: str = DEFAULT_MASTER, conf: dict[str, str] | None = None) -> Any:
    """The process's Spark session for `master` (created once; later calls return the same one).

    Settings beyond these come from Spark's own configuration (spark-defaults.conf under
    $SPARK_CONF_DIR, or PYSPARK_SUBMIT_ARGS): executor memory and cores, a cluster's file system.
    """
    reason = spark_available()
    if reason:
        raise SparkUnavailableError(f"--engine spark: {reason}")
    from pyspark.sql import SparkSession

    active = SparkSession.getActiveSession()
    if active is not None:
        return active
    local = master.startswith("local")
    settings = {
        "spark.ui.enabled": "false",
        "spark.ui.showConsoleProgress": "false",
        # Times are instants: keep Spark from shifting them into the driver's zone.
        "spark.sql.session.timeZone": "UTC",
        # A laptop's local mode gains nothing from Spark's 200 default shuffle partitions.
        "spark.sql.shuffle.partitions": str(4 * (os.cpu_count() or 1)) if local else "200",
        **(conf or {}),
    }
    builder = SparkSession.builder.master(master).appName(APP_NAME)
    for key, value in settings.items():
        builder = builder.config(key, value)
    try:
        session = builder.getOrCreate()
    except Exception as exc:  # noqa: BLE001  (py4j and Spark raise many kinds; all mean "no Spark here")
        first = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
        raise SparkUnavailableError(f"cannot start Spark at {master}: {first}") from exc
    session.sparkContext.setLogLevel("ERROR")
    return session
