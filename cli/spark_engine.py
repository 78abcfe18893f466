"""The Spark engine: runs the generated moment query with Spark SQL over files or a table.

The same query text as the DuckDB engine (`strativ.estimators.moment_query`) runs unchanged;
only the moment table, one row per group, comes back to this process. pyspark is an optional
extra (``pip install 'strativ[spark]'``, and a Java runtime 17 or newer) imported on first use,
so importing this module loads nothing heavy.
"""

from __future__ import annotations

import glob
import logging
import warnings
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .duckdb_engine import SOURCE_VIEW
from .errors import DataError, UsageError

if TYPE_CHECKING:
    import pandas as pd
    from pyspark.sql import DataFrame, SparkSession

__all__ = ["SOURCE_VIEW", "moment_frame", "run_query", "spark_session"]

DEFAULT_MASTER = "local[2]"
"""Spark master used when no Spark session is running in this process."""

_MISSING_EXTRA = "engine 'spark' needs the optional extra: pip install 'strativ[spark]'"
_PARQUET_SUFFIXES = (".parquet", ".pq")
_CSV_SUFFIXES = (".csv", ".csv.gz", ".tsv", ".tsv.gz")
_LOG_CONFIG = Path(__file__).with_name("spark_log4j2.properties")
_QUIET_LOGGERS = ("SQLQueryContextLogger", "DataFrameQueryContextLogger")
"""pyspark's Python loggers that print each failed query, with its Java stack, to stderr."""

Data = Any
"""A file, a glob, a list of files, a table name, or a pandas or Spark data frame."""


def _settings(master: str) -> dict[str, str]:
    """Spark settings of a session this module starts."""
    settings = {
        "spark.app.name": "strativ",
        "spark.ui.enabled": "false",
        "spark.ui.showConsoleProgress": "false",
        "spark.sql.execution.arrow.pyspark.enabled": "true",
        "spark.driver.extraJavaOptions": f"-Dlog4j2.configurationFile={_LOG_CONFIG.as_uri()}",
    }
    if master.startswith("local"):
        # one process on this machine: few shuffle partitions, and the loopback address only
        settings["spark.sql.shuffle.partitions"] = "4"
        settings["spark.driver.host"] = "127.0.0.1"
        settings["spark.driver.bindAddress"] = "127.0.0.1"
    return settings


def _first_line(error: BaseException) -> str:
    text = str(error).strip()
    return text.splitlines()[0] if text else repr(error)


@contextmanager
def _quiet() -> Iterator[None]:
    """Silence pyspark's own reports on stderr while a call runs; its errors still raise."""
    loggers = []
    try:
        from pyspark.logger import PySparkLogger  # pyspark 4 and later
    except ImportError:
        PySparkLogger = None  # noqa: N806
    if PySparkLogger is not None:
        loggers = [PySparkLogger.getLogger(name) for name in _QUIET_LOGGERS]
    levels = [logger.level for logger in loggers]
    with warnings.catch_warnings():
        # pyspark's notes on pandas versions and on its Arrow fallback, not the user's concern
        warnings.filterwarnings("ignore", module=r"pyspark\.")
        for logger in loggers:
            logger.setLevel(logging.CRITICAL + 1)
        try:
            yield
        finally:
            for logger, level in zip(loggers, levels, strict=True):
                logger.setLevel(level)


def spark_session(master: str = DEFAULT_MASTER) -> SparkSession:
    """The Spark session the engine runs on: the running one, or a new quiet one.

    Parameters
    ----------
    master : str, default="local[2]"
        Spark master of a new session. A session already running in this process (on a
        cluster, say) is used as it is, whatever ``master`` says.

    Returns
    -------
    pyspark.sql.SparkSession
        A new session has its web UI and progress bar off, logs errors only, uses Arrow to
        return results and, on a ``local`` master, 4 shuffle partitions and the loopback
        address.

    Raises
    ------
    UsageError
        When pyspark is not installed, or Spark cannot start (no Java runtime, say).
    """
    try:
        from pyspark.sql import SparkSession
    except ImportError:
        raise UsageError(_MISSING_EXTRA) from None
    with _quiet():
        running = SparkSession.getActiveSession()
        if running is not None:
            return running
        builder = SparkSession.builder.master(master)
        for key, value in _settings(master).items():
            builder = builder.config(key, value)
        try:
            session = builder.getOrCreate()
        except Exception as error:  # noqa: BLE001 - a JVM that cannot start, in any form
            raise UsageError(
                f"engine 'spark' could not start Spark on master {master!r}: "
                f"{_first_line(error)}",
                "install a Java runtime (17 or newer) and set JAVA_HOME, or check the master.",
            ) from error
    session.sparkContext.setLogLevel("ERROR")
    return session


def _is_file_name(text: str) -> bool:
    return (
        glob.has_magic(text)
        or text.lower().endswith(_PARQUET_SUFFIXES + _CSV_SUFFIXES)
        or Path(text).exists()
    )


def _file_format(paths: Sequence[str]) -> str:
    """'parquet' or 'csv' by the files' suffix; 'tsv' for tab-separated text."""
    kinds = set()
    for path in paths:
        name = path.lower()
        if name.endswith(_PARQUET_SUFFIXES):
            kinds.add("parquet")
        elif name.endswith((".tsv", ".tsv.gz")):
            kinds.add("tsv")
        else:
            kinds.add("csv")
    if len(kinds) > 1:
        raise DataError(
            None,
            None,
            (),
            f"the files mix formats ({', '.join(sorted(kinds))}): {', '.join(paths)}",
            "give files of one format in one call.",
        )
    return kinds.pop()


def _single_file(data: Data) -> Path | None:
    """The file ``data`` names when it names exactly one, for the error messages."""
    if isinstance(data, Path | str) and not glob.has_magic(str(data)):
        if isinstance(data, Path) or _is_file_name(data):
            return Path(data)
    return None


def _frame(session: SparkSession, data: Data) -> DataFrame:
    """The rows of ``data`` as a Spark DataFrame."""
    if isinstance(data, str) and not _is_file_name(data):
        return session.table(data)
    if isinstance(data, str | Path):
        paths = [str(data)]
    elif isinstance(data, Sequence):
        paths = [str(path) for path in data]
        if not paths:
            raise DataError(None, None, (), "no data files were given.", "name one or more.")
    else:
        import pandas as pd
        from pyspark.sql import DataFrame

        if isinstance(data, pd.DataFrame):
            return session.createDataFrame(data)
        if not isinstance(data, DataFrame):
            raise TypeError(f"expected files, a table name or a data frame, got {type(data)!r}")
        return data
    kind = _file_format(paths)
    if kind == "parquet":
        return session.read.parquet(*paths)
    reader = session.read.options(
        header=True,
        inferSchema=True,
        sep="\t" if kind == "tsv" else ",",
        mode="FAILFAST",  # a malformed line is an error, never a row of missing values
        enforceSchema=False,  # every file's header must match the first file's
    )
    return reader.csv(paths)


def run_query(sql: str, data: Data, *, master: str = DEFAULT_MASTER) -> pd.DataFrame:
    """Run ``sql`` with Spark SQL over ``data`` shown as the temporary view `SOURCE_VIEW`.

    Parameters
    ----------
    sql : str
        The query; it reads the rows from `SOURCE_VIEW`.
    data : str, Path, sequence of them, or a pandas or Spark DataFrame
        A file, a glob or a list of files: Parquet by suffix (``.parquet``, ``.pq``), else
        CSV with a header row (tab-separated for ``.tsv``; types inferred; gzip by
        ``.gz``). A string that is not an existing path, has no such suffix and no glob
        character is a table name (``spark.table``). A Spark DataFrame is used as it is; a
        pandas one is sent to Spark first (small data only).
    master : str, default="local[2]"
        As in `spark_session`.

    Returns
    -------
    pandas.DataFrame
        The query's result; only it is brought to this process.

    Raises
    ------
    DataError
        When Spark cannot read the data or run the query (a missing file, table or column, a
        text value where a number is needed); the message is Spark's first line.
    UsageError
        As in `spark_session`.
    """
    session = spark_session(master)
    path = _single_file(data)
    with _quiet():
        from py4j.protocol import Py4JError
        from pyspark.errors import PySparkException

        try:
            _frame(session, data).createOrReplaceTempView(SOURCE_VIEW)
        except (PySparkException, Py4JError) as error:
            raise DataError(
                path,
                None,
                (),
                f"cannot read the data: {_spark_message(error)}",
                "check the path, or the table name, and the file's format.",
            ) from error
        try:
            return session.sql(sql).toPandas()
        except (PySparkException, Py4JError) as error:
            raise DataError(
                path,
                None,
                (),
                f"the moment query failed: {_spark_message(error)}",
                "check the column names in the spec and that numeric columns hold numbers.",
            ) from error
        finally:
            session.catalog.dropTempView(SOURCE_VIEW)


def _spark_message(error: BaseException) -> str:
    """Spark's first line; for a Java error that pyspark leaves untranslated, its root cause's."""
    from py4j.protocol import Py4JJavaError

    if isinstance(error, Py4JJavaError):
        try:
            cause = error.java_exception
            while cause.getCause() is not None:
                cause = cause.getCause()
            return _first_line(Exception(cause.getMessage() or cause.toString()))
        except Exception:  # noqa: BLE001 - the JVM is gone: keep Python's text
            pass
    return _first_line(error)


def moment_frame(
    data: Data,
    *,
    outcome: str,
    take_up: str,
    offer: str,
    stratum: str,
    cluster: str | None = None,
    covariates: Sequence[str] = (),
    master: str = DEFAULT_MASTER,
) -> pd.DataFrame:
    """The moment table of ``data``: one row per (stratum, offer, take-up[, cluster]) group.

    Parameters
    ----------
    data : str, Path, sequence of them, or a pandas or Spark DataFrame
        As in `run_query`.
    outcome, take_up, offer, stratum : str
        Column names in ``data``.
    cluster : str, optional
        Cluster column.
    covariates : sequence of str, default=()
        Covariate columns.
    master : str, default="local[2]"
        As in `spark_session`.

    Returns
    -------
    pandas.DataFrame
        The result of `strativ.estimators.moment_query`, ready for
        `strativ.estimators.cells_from_moments`.

    Raises
    ------
    DataError, UsageError
        As in `run_query`.
    """
    from strativ.estimators import moment_query

    sql = moment_query(
        SOURCE_VIEW,
        outcome=outcome,
        take_up=take_up,
        offer=offer,
        stratum=stratum,
        cluster=cluster,
        covariates=covariates,
    )
    return run_query(sql, data, master=master)
