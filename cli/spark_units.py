"""A spec's files as one Spark view of checked units, and the run's GROUP BY on Spark.

With ``engine: spark`` in the spec, Spark reads the files (CSV and TSV, plain or gzip, as
text; Parquet typed; Stata, SPSS and Excel through `foreign.read_foreign`), the view is the
one `units_sql.file_select` writes for DuckDB, in Spark's dialect, and the query is the same
`strativ.estimators.group_query`. Only the grouped table, one row per group, comes back to
this process; `grouped.py` turns it into the run's data exactly as it does DuckDB's.

Differences from the DuckDB engine, by design: CSV cells are read as text and typed by the
view's rules (Spark's schema inference reads a whole file first); sums use ``SUM`` (Spark has
no compensated sum), so two runs can differ in the last bits.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

from strativ.estimators import group_query

from .spec import Spec
from .units_sql import (
    SPARK,
    UNITS_VIEW,
    Roles,
    UnreadableError,
    csv_delimiter,
    file_select,
    roles_of,
    wanted_columns,
)
from .waves import centre_keys

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["spark_group_frame"]

_KINDS = {
    "string": "VARCHAR", "boolean": "BOOLEAN", "tinyint": "TINYINT", "smallint": "SMALLINT",
    "int": "INTEGER", "bigint": "BIGINT", "float": "FLOAT", "double": "DOUBLE",
}
"""Spark type names -> the type names `units_sql` reads (decimal types keep their name)."""


def _kind(spark_type: str) -> str:
    if spark_type.startswith("decimal"):
        return "DECIMAL"
    if spark_type.startswith(("varchar", "char")):
        return "VARCHAR"
    return _KINDS.get(spark_type, spark_type.upper())


def _frame(session: Any, path: Path, spec: Spec, wanted: list[str]) -> Any:
    lower = path.name.lower()
    if lower.endswith((".parquet", ".pq")):
        return session.read.parquet(str(path))
    if lower.endswith((".dta", ".sav", ".xlsx")):
        from .foreign import read_foreign

        return session.createDataFrame(read_foreign(path, wanted).to_pandas())
    return session.read.options(
        header=True, inferSchema=False, sep=csv_delimiter(path, spec), quote='"', escape='"',
        mode="FAILFAST", encoding="UTF-8",
    ).csv(str(path))


def spark_group_frame(spec: Spec, centre_rows: int | None) -> tuple[Roles, pd.DataFrame]:
    """Run the run's GROUP BY over the files of `spec` on Spark.

    Parameters
    ----------
    spec : Spec
        A validated spec with ``engine: spark``.
    centre_rows : int, optional
        As in `strativ.estimators.group_query`.

    Returns
    -------
    (Roles, pandas.DataFrame)
        The view's role names and the grouped table, as DuckDB gives them.

    Raises
    ------
    UnreadableError
        When Spark cannot read a file or run the query; the row reader then gives the
        located message.
    UsageError
        When pyspark is missing or Spark cannot start (`spark_engine.spark_session`).
    """
    from .spark_engine import _quiet, spark_session

    session = spark_session(spec.reading.master)
    roles = roles_of(spec)
    _, wanted = wanted_columns(spec)
    views = []
    with _quiet():
        from py4j.protocol import Py4JError
        from pyspark.errors import PySparkException

        try:
            selects = []
            for index, path in enumerate(spec.data):
                frame = _frame(session, path, spec, wanted)
                header = list(frame.columns)
                if any(header.count(w) != 1 for w in wanted):
                    raise UnreadableError(f"{path.name}: a column is missing or repeated")
                view = f"strativ_file_{index}"
                frame.createOrReplaceTempView(view)
                views.append(view)
                kinds = {name: _kind(kind) for name, kind in frame.dtypes}
                selects.append(file_select(index, view, kinds, spec, SPARK))
            session.sql("\nUNION ALL\n".join(selects)).createOrReplaceTempView(UNITS_VIEW)
            views.append(UNITS_VIEW)
            ranged = (roles.probability,) if roles.probability else ()
            sql = group_query(UNITS_VIEW, keys=roles.keys, centre_keys=centre_keys(spec, roles),
                              outcomes=roles.outcomes,
                              covariates=roles.covariates + roles.indicators,
                              uncentred=roles.indicators,
                              counted=roles.flags, ranged=ranged,
                              total="SUM", centre_rows=centre_rows)
            return roles, session.sql(sql).toPandas()
        except (PySparkException, Py4JError) as error:
            raise UnreadableError(str(error).strip().splitlines()[0]) from None
        finally:
            for view in views:
                session.catalog.dropTempView(view)
