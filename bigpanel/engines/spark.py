"""The same fit on Spark SQL: the passes run on the cluster (or in local mode).

Parquet files become the temporary view ``bp_source`` (or a catalog table
does); every intermediate "temporary table" is a cached DataFrame registered
as a temporary view. Each fit gets its own Spark session (temporary views and
SQL settings apart) on one shared Spark context, which stays up for the next fit.
"""

from __future__ import annotations

import glob as globlib
import os
import shutil
import tempfile
import warnings
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import Any, Callable, ClassVar, Iterator

import pyarrow as pa

from ..errors import BigPanelError
from .base import Engine, first_line
from .dialect import TranslatingEngine
from .source import PARQUET_SUFFIXES, Source, parquet_files

DEFAULT_MASTER = "local[*]"

# The driver's logging while it starts: warnings (the level Spark expects of an
# interactive session, so it prints no notice about it) without the notes on the
# host's address and Hadoop's native library; errors only once it runs.
_LOG4J = """\
rootLogger.level = warn
rootLogger.appenderRef.stderr.ref = console
logger.utils.name = org.apache.spark.util.Utils
logger.utils.level = error
logger.hadoop.name = org.apache.hadoop.util.NativeCodeLoader
logger.hadoop.level = error
appender.console.type = Console
appender.console.name = console
appender.console.target = SYSTEM_ERR
appender.console.layout.type = PatternLayout
appender.console.layout.pattern = %d{yy/MM/dd HH:mm:ss} %p %c{1}: %m%n
"""

# Spark SQL types (class names) under the DuckDB names the spec checks.
_DUCK_TYPES = {
    "DoubleType": "DOUBLE",
    "FloatType": "FLOAT",
    "LongType": "BIGINT",
    "IntegerType": "INTEGER",
    "ShortType": "SMALLINT",
    "ByteType": "TINYINT",
    "BooleanType": "BOOLEAN",
    "StringType": "VARCHAR",
    "VarcharType": "VARCHAR",
    "CharType": "VARCHAR",
    "DateType": "DATE",
    "TimestampType": "TIMESTAMP WITH TIME ZONE",
    "TimestampNTZType": "TIMESTAMP",
    "BinaryType": "BLOB",
}


def _duck_type(dtype: Any) -> str:
    name = type(dtype).__name__
    if name == "DecimalType":
        return f"DECIMAL({dtype.precision},{dtype.scale})"
    return _DUCK_TYPES.get(name, dtype.simpleString().upper())


@dataclass
class SparkEngine(TranslatingEngine):
    """An :class:`Engine` over a Spark session.

    Statements are translated to Spark SQL (:mod:`bigpanel.engines.dialect`); a
    temporary table is a DataFrame cached and counted at once (so its pass runs
    when asked), then registered as a temporary view.
    """

    name: ClassVar[str] = "spark"
    title: ClassVar[str] = "Spark"
    dialect: ClassVar[str] = "spark"
    cached: dict[str, Any] = field(default_factory=dict, init=False)

    def _execute(self, sql: str, params: dict) -> None:
        for step in self.steps(sql):
            frame = self.con.sql(step.sql, args=params or None)
            if step.table is None:
                frame.collect()
            else:
                self._keep(step.table, frame)

    def _keep(self, table: str, frame: Any) -> None:
        frame = frame.persist()
        frame.count()
        frame.createOrReplaceTempView(table)
        old = self.cached.pop(table, None)
        if old is not None:
            old.unpersist()
        self.cached[table] = frame

    def _fetch(self, sql: str, params: dict) -> pa.Table:
        (step,) = self.steps(sql)  # a query: one step, nothing to materialise
        return _arrow(self.con.sql(step.sql, args=params or None))

    def _put(self, name: str, table: pa.Table) -> None:
        with _quiet():
            try:
                frame = self.con.createDataFrame(table)
            except TypeError:  # Spark before 4.0 takes pandas, not Arrow
                frame = self.con.createDataFrame(table.to_pandas())
        frame.createOrReplaceTempView(name)

    def close(self) -> None:
        """Release this fit's cached tables and temporary views; the Spark context stays up."""
        for frame in self.cached.values():
            frame.unpersist()
        self.cached.clear()
        for tab in self.con.catalog.listTables():
            if tab.isTemporary:
                self.con.catalog.dropTempView(tab.name)

    def driver_errors(self) -> tuple[type[BaseException], ...]:
        from py4j.protocol import Py4JError
        from pyspark.errors import PySparkException

        return (PySparkException, Py4JError)


@contextmanager
def _quiet() -> Iterator[None]:
    """Silence pyspark's notice that it does not yet support the installed pandas."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="PySpark does not yet fully support pandas", category=FutureWarning)
        yield


def _arrow(frame: Any) -> pa.Table:
    if hasattr(frame, "toArrow"):
        return frame.toArrow()
    with _quiet():
        return pa.Table.from_pandas(frame.toPandas(), preserve_index=False)


def _session(master: str | None) -> Any:
    """A new session on the running Spark context (started on ``master`` if none runs)."""
    try:
        from pyspark.sql import SparkSession
    except ImportError:
        raise BigPanelError("the Spark engine needs pyspark: pip install 'bigpanel[spark]'") from None
    active = SparkSession.getActiveSession()
    if active is not None:
        running = active.sparkContext.master
        if master is not None and master != running:
            raise BigPanelError(f"Spark already runs on {running} in this process; cannot also use master {master}")
        base = active
    else:
        master = master or DEFAULT_MASTER
        if not (shutil.which("java") or os.environ.get("JAVA_HOME")):
            raise BigPanelError("the Spark engine needs Java: no 'java' on PATH and JAVA_HOME is not set")
        builder = (
            SparkSession.builder.master(master)
            .appName("bigpanel")
            .config("spark.sql.session.timeZone", "UTC")
            .config("spark.ui.enabled", "false")
            .config("spark.ui.showConsoleProgress", "false")
        )
        if master.startswith("local"):
            builder = builder.config("spark.driver.bindAddress", "127.0.0.1").config("spark.driver.host", "127.0.0.1")
        with tempfile.NamedTemporaryFile("w", suffix=".properties", prefix="bigpanel-log4j2-", delete=False) as cfg:
            cfg.write(_LOG4J)
        builder = builder.config("spark.driver.extraJavaOptions", f"-Dlog4j2.configurationFile=file:{cfg.name}")
        try:
            with _quiet():
                base = builder.getOrCreate()
        except Exception as exc:  # pyspark raises its own runtime errors and Py4J's, both without a common base
            raise BigPanelError(f"cannot start Spark on {master}: {first_line(exc)}") from None
        finally:
            os.unlink(cfg.name)  # read once, when the JVM starts
        base.sparkContext.setLogLevel("ERROR")
    session = base.newSession()
    session.conf.set("spark.sql.session.timeZone", "UTC")
    if base.sparkContext.master.startswith("local"):
        session.conf.set("spark.sql.shuffle.partitions", str(base.sparkContext.defaultParallelism))
    return session


def open_spark(
    location: str, table: str | None, master: str | None = None, on_step: Callable[[str], None] | None = None
) -> tuple[Engine, Source]:
    """A Spark engine holding the view ``bp_source`` over Parquet at ``location`` (or the catalog ``table``).

    ``location`` is a Parquet file, folder or glob on this machine, or a URI
    (``hdfs://``, ``s3a://``, ...) that Spark reads itself; with ``table`` the
    panel is that catalog table and ``location`` only labels it.
    """
    session = _session(master)
    from pyspark.errors import PySparkException
    from py4j.protocol import Py4JError

    eng = SparkEngine(session, on_step=on_step)
    try:
        if table:
            if not session.catalog.tableExists(table):
                names = sorted(t.name for t in session.catalog.listTables())
                raise BigPanelError(
                    f"table {table!r} not found in the Spark catalog"
                    + (f" (tables: {', '.join(names)})" if names else " (it holds no tables)")
                )
            frame, kind = session.read.table(table), "table"
        else:
            local = "://" not in location
            low = location.lower()
            if local and not (os.path.isdir(location) or globlib.has_magic(location) or low.endswith(PARQUET_SUFFIXES)):
                raise BigPanelError(
                    f"Spark reads Parquet files, folders or globs (or a catalog --table), not {location}"
                )
            paths = parquet_files(location) if local else [location]
            frame, kind = session.read.parquet(*paths), "parquet"
        frame.createOrReplaceTempView("bp_source")
    except BigPanelError:
        eng.close()
        raise
    except (PySparkException, Py4JError) as exc:
        eng.close()
        raise BigPanelError(f"cannot read {table or location} in Spark: {first_line(exc)}") from None
    columns = {f.name: _duck_type(f.dataType) for f in frame.schema.fields}
    return eng, Source(location=location, kind=kind, columns=columns)
