"""Runs rchold's shipped SQL (host-check/sql/yield.sql, aging.sql) on a
Parquet dataset that `rchold export --parquet` (or `synth-log --parquet`)
wrote, with Apache Spark (pyspark, local mode unless SPARK_MASTER says
otherwise) or Apache DataFusion, and prints the rows and the time each query
took as JSON.

Usage: python3 benches/engines.py spark|datafusion DATASET > out.json
"""

import json
import os
import pathlib
import sys
import time

SQL = pathlib.Path(__file__).resolve().parent.parent / "host-check" / "sql"
REPORTS = ["yield", "aging"]


def run_datafusion(dataset):
    import datafusion
    import pyarrow as pa

    ctx = datafusion.SessionContext()
    ctx.register_parquet(
        "readings",
        f"{dataset}/readings/",
        table_partition_cols=[("station", "string"), ("day", "string")],
    )
    ctx.register_parquet("setups", f"{dataset}/setups/")
    out = {"engine": f"datafusion {datafusion.__version__}"}
    for name in REPORTS:
        t0 = time.perf_counter()
        batches = ctx.sql((SQL / f"{name}.sql").read_text()).collect()
        rows = pa.Table.from_batches(batches).to_pylist() if batches else []
        out[name] = {"seconds": time.perf_counter() - t0, "rows": rows}
    return out


def run_spark(dataset):
    import pyspark
    from pyspark.sql import SparkSession

    t0 = time.perf_counter()
    spark = (
        SparkSession.builder.master(os.environ.get("SPARK_MASTER", "local[*]"))
        .appName("rchold-sql")
        # Station names stay strings even when they look like numbers.
        .config("spark.sql.sources.partitionColumnTypeInference.enabled", "false")
        .config("spark.ui.enabled", "false")
        .config("spark.ui.showConsoleProgress", "false")
        .config("spark.driver.memory", os.environ.get("SPARK_DRIVER_MEMORY", "4g"))
        .getOrCreate()
    )
    spark.sparkContext.setLogLevel("ERROR")
    started = time.perf_counter() - t0
    spark.read.option("basePath", f"{dataset}/readings").parquet(f"{dataset}/readings").createOrReplaceTempView(
        "readings"
    )
    spark.read.parquet(f"{dataset}/setups").createOrReplaceTempView("setups")
    out = {"engine": f"spark {pyspark.__version__}", "startup_seconds": started}
    for name in REPORTS:
        t0 = time.perf_counter()
        rows = [r.asDict() for r in spark.sql((SQL / f"{name}.sql").read_text()).collect()]
        out[name] = {"seconds": time.perf_counter() - t0, "rows": rows}
    spark.stop()
    return out


def main():
    if len(sys.argv) != 3 or sys.argv[1] not in ("spark", "datafusion"):
        sys.exit("usage: engines.py spark|datafusion DATASET")
    run = run_spark if sys.argv[1] == "spark" else run_datafusion
    json.dump(run(sys.argv[2]), sys.stdout, default=str)


if __name__ == "__main__":
    main()
