"""Writers of the open formats: Arrow/Parquet, ROOT TTrees (uproot) and pandas DataFrames.

Each maps the table's declared column kinds to its own types, so every format carries the same
columns: ``int`` → int64 (nullable), ``float`` → float64 (NaN/None as null), ``str`` → UTF-8 text,
``time`` → UTC timestamps in microseconds, ``samples`` → a float64 list per row.

ROOT has no null and no text branch in uproot's writer: there a missing int is -1, a missing float
NaN, a time counts microseconds since 1970-01-01 UTC (``<name>_us``) and each text column becomes
an int32 code into a second tree, ``<table>_text`` (branches ``column``, ``code``, ``text`` as its
UTF-8 bytes, jagged), so that a ROOT user can join them back.  Heavy libraries are imported here,
when a writer runs, with an error naming the extra to install.
"""

from __future__ import annotations

import importlib
import math
from datetime import UTC, datetime
from pathlib import Path
from types import ModuleType
from typing import Any

import numpy as np

from sequencer.errors import MissingExtra
from sequencer.results.tables import Column, Table

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)


def need(module: str, extra: str, purpose: str) -> ModuleType:
    """Import ``module`` or raise ``MissingExtra`` naming the extra that provides it."""
    try:
        return importlib.import_module(module)
    except ImportError as exc:
        raise MissingExtra(module.split(".")[0], extra, purpose) from exc


# -- Arrow / Parquet / pandas ----------------------------------------------------------------------


def _arrow_type(pa: Any, column: Column) -> Any:
    return {
        "int": pa.int64(),
        "float": pa.float64(),
        "str": pa.string(),
        "time": pa.timestamp("us", tz="UTC"),
        "samples": pa.list_(pa.float64()),
    }[column.kind]


def _arrow_value(column: Column, value: Any) -> Any:
    if value is None:
        return None
    if column.kind == "float":
        v = float(value)
        return v if math.isfinite(v) else None
    if column.kind == "samples":
        return np.asarray(value, dtype=np.float64)
    if column.kind == "str":
        return str(value)
    return value


def to_arrow(table: Table) -> Any:
    """The table as a ``pyarrow.Table`` with an explicit schema (column kinds, not guesses)."""
    pa = need("pyarrow", "data", "Arrow and Parquet export")
    schema = pa.schema([pa.field(c.name, _arrow_type(pa, c)) for c in table.columns])
    arrays = [
        pa.array([_arrow_value(c, row.get(c.name)) for row in table.rows], type=_arrow_type(pa, c))
        for c in table.columns
    ]
    return pa.Table.from_arrays(arrays, schema=schema)


def write_parquet(table: Table, path: Path) -> Path:
    """Write ``table`` as one Parquet file (zstd-compressed) at ``path``."""
    pq = need("pyarrow.parquet", "data", "Parquet export")
    pq.write_table(to_arrow(table), str(path), compression="zstd")
    return path


def to_frame(table: Table) -> Any:
    """The table as a pandas DataFrame (nullable Int64 for ints, text as ``object``)."""
    need("pandas", "data", "pandas DataFrames of results")
    arrow = to_arrow(table)
    frame = arrow.to_pandas(types_mapper=_pandas_types(table))
    return frame


def _pandas_types(table: Table) -> Any:
    pd = need("pandas", "data", "pandas DataFrames of results")
    pa = need("pyarrow", "data", "pandas DataFrames of results")
    mapping = {pa.int64(): pd.Int64Dtype()}
    return mapping.get


# -- ROOT (uproot) ----------------------------------------------------------------------------------


def _root_branches(table: Table) -> tuple[dict[str, Any], dict[str, list[str]]]:
    """Branch arrays of one tree, and per text column the texts its codes index."""
    branches: dict[str, Any] = {}
    texts: dict[str, list[str]] = {}
    for c in table.columns:
        values = table.values(c.name)
        if c.kind == "int":
            branches[c.name] = np.array([-1 if v is None else int(v) for v in values], dtype=np.int64)
        elif c.kind == "float":
            branches[c.name] = np.array(
                [math.nan if v is None else float(v) for v in values], dtype=np.float64
            )
        elif c.kind == "time":
            branches[f"{c.name}_us"] = np.array(
                [-1 if v is None else (v - _EPOCH) // _ONE_US for v in values], dtype=np.int64
            )
        elif c.kind == "str":
            index: dict[str, int] = {}
            codes = [-1 if v is None else index.setdefault(str(v), len(index)) for v in values]
            branches[c.name] = np.array(codes, dtype=np.int32)
            texts[c.name] = list(index)
        else:  # samples: jagged
            ak = need("awkward", "data", "ROOT export of traces")
            branches[c.name] = ak.Array([np.asarray(v, dtype=np.float64) for v in values])
    return branches, texts


def _text_tree(texts: dict[str, list[str]]) -> dict[str, Any]:
    ak = need("awkward", "data", "ROOT export")
    names = sorted(texts)
    columns = [n for n in names for _ in texts[n]]
    column_index = {n: i for i, n in enumerate(names)}
    return {
        "column": np.array([column_index[n] for n in columns], dtype=np.int32),
        "code": np.array([i for n in names for i in range(len(texts[n]))], dtype=np.int32),
        "text": ak.Array([np.frombuffer(t.encode(), dtype=np.uint8) for n in names for t in texts[n]]),
    }, names


def write_root(tables: list[Table], path: Path) -> Path:
    """Write each table as a TTree named after it (plus its ``<name>_text`` tree) into ``path``."""
    uproot = need("uproot", "data", "ROOT export")
    with uproot.recreate(str(path)) as f:
        for table in tables:
            branches, texts = _root_branches(table)
            _put_tree(f, table.name, branches, len(table.rows))
            text_branches, names = _text_tree(texts)
            _put_tree(f, f"{table.name}_text", text_branches, len(text_branches["code"]))
            f[f"{table.name}_text_columns"] = "\n".join(names)
    return path


def _put_tree(f: Any, name: str, branches: dict[str, Any], n_rows: int) -> None:
    """A tree with ``branches``; declared from the types first so that an empty table still
    gets its branches."""
    types = {k: (v.type.content if hasattr(v, "layout") else v.dtype) for k, v in branches.items()}
    tree = f.mktree(name, {k: _branch_type(k, t, branches[k]) for k, t in types.items()})
    if n_rows:
        tree.extend(branches)


def _branch_type(name: str, dtype: Any, value: Any) -> Any:
    if hasattr(value, "layout"):  # awkward jagged array
        return "var * uint8" if name == "text" else "var * float64"
    return np.dtype(dtype)


_ONE_US = datetime(1970, 1, 1, 0, 0, 0, 1, tzinfo=UTC) - _EPOCH


def read_root(path: Path, name: str) -> dict[str, list[Any]]:
    """A table written by ``write_root`` read back with uproot: text codes turned into text again,
    ``-1`` into None for ints and codes, ``<name>_us`` into aware datetimes, NaN floats kept."""
    uproot = need("uproot", "data", "reading ROOT files")
    with uproot.open(str(path)) as f:
        tree = f[name].arrays(library="np")
        text = f[f"{name}_text"].arrays(library="np")
        names = str(f[f"{name}_text_columns"]).split("\n")
    lookup: dict[str, dict[int, str]] = {n: {} for n in names}
    for col, code, raw in zip(text["column"], text["code"], text["text"], strict=True):
        lookup[names[int(col)]][int(code)] = bytes(np.asarray(raw, dtype=np.uint8)).decode()
    out: dict[str, list[Any]] = {}
    counters = {f"n{k}" for k, v in tree.items() if v.dtype == object}  # uproot's jagged counts
    for key, values in tree.items():
        if key in counters:
            continue
        if key.endswith("_us") and values.dtype == np.int64 and key not in lookup:
            out[key[:-3]] = [None if v < 0 else _EPOCH + int(v) * _ONE_US for v in values]
        elif key in lookup:
            out[key] = [None if v < 0 else lookup[key][int(v)] for v in values]
        elif values.dtype == np.int64:
            out[key] = [None if v == -1 else int(v) for v in values]
        elif values.dtype == object:
            out[key] = [np.asarray(v, dtype=np.float64) for v in values]
        else:
            out[key] = [float(v) for v in values]
    return out
