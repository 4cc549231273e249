"""The Spark engine: the heavy reading of `rollup`, `size` and `correlate` on a Spark cluster.

Nothing here imports pyspark at import time; `session.spark_session` does, when a command asks for
`--engine spark`. What runs where:

* the driver (this process) plans from the catalog as the DuckDB engine does: which counters,
  which files, which periods, the time grid;
* Spark reads the same Parquet files and reduces the points: per (counter, period) moments and
  exact quantiles for rollups (rollup.py), per (counter, bucket) means and their combination for
  sizing, ranks, lag-1 autocorrelations and per (counter, lag) co-moments with the target for
  correlation (series.py);
* the driver receives results the size of the answer (one row per counter and period, one value
  per bucket, one r per counter and lag) and finishes them with the same code as the DuckDB
  engine: the rollup rows through rollup.ROWS_SQL and the same write, the sizing and correlation
  statistics through warehouse/stats/.
"""
