"""File formats: JSON records, CIF text, Parquet tables with units, manifests.

This is the only library module that touches the file system ("assemble" and
"pipeline" reach files through it). Everything it
returns is plain Python, numpy or pandas, ready for the physics modules.
Writes are atomic (temporary file plus rename) so an interrupted run never
leaves a partial table behind.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, Mapping

import numpy as np

if TYPE_CHECKING:
    import pandas as pd
    import pyarrow as pa

# pandas and pyarrow are imported inside the functions that need them: the
# Snakefile imports this module to list the campaign, and Snakemake's start-up
# should not pay for them.

#: Records larger than this are rejected before parsing (bytes).
MAX_RECORD_BYTES = 2_000_000
#: Structures larger than this are rejected before parsing (bytes).
MAX_CIF_BYTES = 5_000_000

_UMASK = os.umask(0)
os.umask(_UMASK)

LIBRARY_DIR = Path(__file__).resolve().parent
SCHEMA_DIR = LIBRARY_DIR.parent / "schemas"


@dataclass(frozen=True)
class RawRecord:
    """A record file as read: its bytes' hash and either the parsed object or a reason."""

    path: str
    sha256: str
    data: Any = None
    error: str | None = None


def sha256_bytes(data: bytes) -> str:
    """Hex SHA-256 of a byte string."""
    return hashlib.sha256(data).hexdigest()


def sha256_file(path: str | os.PathLike) -> str:
    """Hex SHA-256 of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def canonical_json_hash(obj: Any) -> str:
    """Hex SHA-256 of a JSON-serialisable object with sorted keys (for config hashes)."""
    text = json.dumps(obj, sort_keys=True, separators=(",", ":"), default=str)
    return sha256_bytes(text.encode("utf-8"))


def _reject_constant(name: str) -> float:
    raise ValueError(f"non-finite number '{name}' is not allowed")


def _parse_int(text: str) -> int | float:
    """JSON integer; one beyond the float range becomes +-inf so the contract reports
    the field as not finite (instead of an OverflowError when it is converted)."""
    value = int(text)
    try:
        float(value)
    except OverflowError:
        return -math.inf if value < 0 else math.inf
    return value


def read_record(path: str | os.PathLike) -> RawRecord:
    """Read and parse one JSON record file, never raising for bad content.

    Empty, oversized, non-UTF-8, syntactically broken files and non-finite
    numbers (NaN, Infinity) come back with ``error`` set to a reason.
    """
    path = str(path)
    try:
        size = os.path.getsize(path)
        if size > MAX_RECORD_BYTES:
            with open(path, "rb") as fh:
                head = fh.read(65536)
            return RawRecord(path, sha256_bytes(head + str(size).encode()),
                             error=f"file is {size} bytes, larger than the {MAX_RECORD_BYTES}-byte limit")
        with open(path, "rb") as fh:
            raw = fh.read()
    except OSError as exc:
        return RawRecord(path, "", error=f"cannot read file: {exc.strerror or exc}")
    digest = sha256_bytes(raw)
    if not raw.strip():
        return RawRecord(path, digest, error="file is empty")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        return RawRecord(path, digest, error=f"not UTF-8 text (byte {exc.start}: {exc.reason})")
    if text.startswith("\ufeff"):
        text = text[1:]
    try:
        data = json.loads(text, parse_constant=_reject_constant, parse_int=_parse_int)
    except json.JSONDecodeError as exc:
        return RawRecord(path, digest, error=f"invalid JSON at line {exc.lineno} column {exc.colno}: {exc.msg}")
    except (ValueError, RecursionError) as exc:
        return RawRecord(path, digest, error=f"invalid JSON: {exc}")
    return RawRecord(path, digest, data=data)


def read_text_limited(path: str | os.PathLike, limit: int = MAX_CIF_BYTES) -> tuple[bytes | None, str | None]:
    """Bytes of a file, or a reason when it is missing, unreadable or too large."""
    try:
        size = os.path.getsize(path)
    except OSError:
        return None, "file not found"
    if size > limit:
        return None, f"file is {size} bytes, larger than the {limit}-byte limit"
    try:
        with open(path, "rb") as fh:
            return fh.read(), None
    except OSError as exc:
        return None, f"cannot read file: {exc.strerror or exc}"


#: Campaign sub-folders and the file suffix each one holds.
CAMPAIGN_FOLDERS = {"entries": ".json", "structures": ".cif"}


def campaign_listing(campaign: str | os.PathLike, kind: str) -> list[tuple[str, int, int]]:
    """Files of one campaign folder as ``(name, size in bytes, modification time in ns)``.

    ``kind`` is ``"entries"`` (``*.json``) or ``"structures"`` (``*.cif``). Hidden
    files are skipped; a missing folder lists nothing. An entry that cannot be
    stat'ed (a dangling link) is still listed, with size and time -1, so that
    the screen reports it instead of silently dropping it. Sorted by name.
    One ``scandir`` pass: about 10 ms per 10,000 files.
    """
    suffix = CAMPAIGN_FOLDERS[kind]
    try:
        it = os.scandir(Path(campaign) / kind)
    except (FileNotFoundError, NotADirectoryError):
        return []
    rows = []
    with it:
        for entry in it:
            if entry.name.startswith(".") or not entry.name.endswith(suffix):
                continue
            try:
                st = entry.stat()
                rows.append((entry.name, int(st.st_size), int(st.st_mtime_ns)))
            except OSError:
                rows.append((entry.name, -1, -1))
    return sorted(rows)


def snapshot_json(folder: str | os.PathLike, prefix: str, content: Any) -> str:
    """Write ``content`` to ``folder/<prefix>-<digest>.json`` (once) and return that path.

    The file name carries a digest of the content, so a rule that takes the file
    as input re-runs exactly when the content changes: the name changes (Snakemake's
    ``input`` trigger) and the new file is newer than the rule's outputs (its
    ``mtime`` trigger). Older snapshots with the same prefix are removed, so
    returning to an earlier content writes a fresh (newer) file again. The
    workflow keeps job settings and campaign listings this way instead of in rule
    ``params``.
    """
    import re

    text = json.dumps(content, sort_keys=True, separators=(",", ":"), default=str) + "\n"
    folder = Path(folder)
    path = folder / f"{prefix}-{sha256_bytes(text.encode('utf-8'))[:16]}.json"
    if not path.exists():
        write_text(text, path)
    pattern = re.compile(re.escape(prefix) + r"-[0-9a-f]{16}\.json")
    for old in folder.glob(f"{prefix}-*.json"):
        if old != path and pattern.fullmatch(old.name):
            try:
                old.unlink()
            except FileNotFoundError:  # removed by a concurrent run
                pass
    return str(path)


def load_schema(name: str) -> dict:
    """Load a JSON schema shipped in workflow/schemas by file name."""
    with open(SCHEMA_DIR / name, encoding="utf-8") as fh:
        return json.load(fh)


def library_digest(modules: list[str] | None = None) -> str:
    """Short content hash of the library sources (all modules, or the named ones).

    Used as the code version of every result row and as part of cache keys, so
    a change of the physics code invalidates cached results.
    """
    names = sorted(modules) if modules else sorted(p.name for p in LIBRARY_DIR.glob("*.py"))
    h = hashlib.sha256()
    for name in names:
        h.update(name.encode())
        h.update((LIBRARY_DIR / name).read_bytes())
    return h.hexdigest()[:16]


def read_source(path: str | os.PathLike) -> str:
    """Text of a source file (UTF-8)."""
    return Path(path).read_text(encoding="utf-8")


def library_sources(folder: str | os.PathLike = LIBRARY_DIR) -> dict[str, str]:
    """Source text of every library module, by module name (``"io"``, ``"__init__"``, ...)."""
    return {p.stem: read_source(p) for p in sorted(Path(folder).glob("*.py"))}


def schema_files(folder: str | os.PathLike = SCHEMA_DIR) -> list[Path]:
    """The JSON schemas shipped in workflow/schemas (read by the library and the workflow)."""
    return sorted(Path(folder).glob("*.json"))


def schema_sources(folder: str | os.PathLike = SCHEMA_DIR) -> dict[str, str]:
    """Text of every JSON schema, by file name."""
    return {p.name: read_source(p) for p in schema_files(folder)}


def _atomic_target(path: str | os.PathLike) -> tuple[Path, str]:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    # A job killed while writing leaves its temporary file; the re-run clears it.
    for stale in path.parent.glob(f".{path.name}.*.part"):
        try:
            stale.unlink()
        except OSError:
            pass
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    os.close(fd)
    os.chmod(tmp, 0o666 & ~_UMASK)  # mkstemp makes 0600; results are shared like any file
    return path, tmp


def _arrow_table(frame: pd.DataFrame | pa.Table, units: Mapping[str, str], descriptions: Mapping[str, str],
                 table_metadata: Mapping[str, str] | None) -> pa.Table:
    """An Arrow table of ``frame`` (a DataFrame or already a table) with unit and description
    metadata on its fields and ``table_metadata`` on its schema."""
    import pyarrow as pa

    table = frame if isinstance(frame, pa.Table) else pa.Table.from_pandas(frame, preserve_index=False)
    # An empty object column has no type (Arrow: null); all such columns here hold text.
    table = table.cast(pa.schema([f.with_type(pa.large_string()) if pa.types.is_null(f.type) else f
                                  for f in table.schema], metadata=table.schema.metadata))
    fields = []
    for f in table.schema:
        meta = dict(f.metadata or {})
        if f.name in units:
            meta[b"unit"] = units[f.name].encode()
        if f.name in descriptions:
            meta[b"description"] = descriptions[f.name].encode()
        fields.append(f.with_metadata(meta) if meta else f)
    schema_meta = dict(table.schema.metadata or {})
    for key, value in (table_metadata or {}).items():
        schema_meta[key.encode()] = str(value).encode()
    return table.cast(pa.schema(fields, metadata=schema_meta))


def _dictionary_columns(schema: pa.Schema) -> list[str]:
    """Columns worth dictionary encoding: the text ones (identifiers, labels, hashes).

    Numbers are left plain: dictionary-encoding float columns of unique values
    triples the write time and, under zstd, makes the file larger, not smaller.
    """
    import pyarrow as pa

    return [f.name for f in schema if pa.types.is_string(f.type) or pa.types.is_large_string(f.type)]


class ParquetSink:
    """Write a large table part by part (one row group each), atomically on close.

    Memory stays at one part. Every part is cast to the schema of the first
    non-empty part; if all parts are empty the last one defines the (empty) file.
    """

    def __init__(self, path: str | os.PathLike, units: Mapping[str, str] | None = None,
                 descriptions: Mapping[str, str] | None = None, table_metadata: Mapping[str, str] | None = None):
        self._target, self._tmp = _atomic_target(path)
        self._units, self._descriptions, self._meta = units or {}, descriptions or {}, table_metadata
        self._writer = None  # a pyarrow.parquet.ParquetWriter once the first part arrives
        self._empty = None  # the last empty part (a pyarrow.Table)

    def write(self, frame: pd.DataFrame | pa.Table) -> None:
        """Append one part: a DataFrame, or an Arrow table (written without a pandas round trip)."""
        import pyarrow.parquet as pq

        table = _arrow_table(frame, self._units, self._descriptions, self._meta)
        if not len(frame):
            self._empty = table
            return
        if self._writer is None:
            self._writer = pq.ParquetWriter(self._tmp, table.schema, compression="zstd",
                                            use_dictionary=_dictionary_columns(table.schema))
        self._writer.write_table(table.cast(self._writer.schema))

    def close(self) -> None:
        import pyarrow as pa
        import pyarrow.parquet as pq

        try:
            if self._writer is None:
                pq.write_table(self._empty if self._empty is not None else pa.table({}), self._tmp,
                               compression="zstd")
            else:
                self._writer.close()
            os.replace(self._tmp, self._target)
        finally:
            if os.path.exists(self._tmp):
                os.unlink(self._tmp)

    def __enter__(self) -> "ParquetSink":
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is None:
            self.close()
        else:
            if self._writer is not None:
                self._writer.close()
            if os.path.exists(self._tmp):
                os.unlink(self._tmp)


def write_parquet(frame: pd.DataFrame, path: str | os.PathLike,
                  units: Mapping[str, str] | None = None,
                  descriptions: Mapping[str, str] | None = None,
                  table_metadata: Mapping[str, str] | None = None) -> None:
    """Write a DataFrame to Parquet atomically, units and descriptions in Arrow field metadata."""
    import pyarrow.parquet as pq

    table = _arrow_table(frame, units or {}, descriptions or {}, table_metadata)
    target, tmp = _atomic_target(path)
    try:
        pq.write_table(table, tmp, compression="zstd", use_dictionary=_dictionary_columns(table.schema))
        os.replace(tmp, target)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def read_arrow(path: str | os.PathLike, columns: list[str] | None = None) -> pa.Table:
    """Read a Parquet table (or some of its columns) as an Arrow table, metadata included.

    One file, read directly (``ParquetFile``), without the dataset layer that
    ``pyarrow.parquet.read_table`` builds per call: a few ms less per file.
    """
    import pyarrow.parquet as pq

    with pq.ParquetFile(path) as handle:
        return handle.read(columns=columns)


def read_parquet(path: str | os.PathLike, columns: list[str] | None = None) -> pd.DataFrame:
    """Read a Parquet table (or some of its columns) into pandas.

    The same frame as ``pandas.read_parquet`` (pandas' schema entry restores the
    dtypes), through :func:`read_arrow`.
    """
    return read_arrow(path, columns=columns).to_pandas()


def parquet_column_names(path: str | os.PathLike) -> list[str]:
    """Names of the columns of a Parquet file, without reading its data."""
    import pyarrow.parquet as pq

    return list(pq.read_schema(path).names)


def parquet_units(path: str | os.PathLike) -> dict[str, str]:
    """The unit of every field that carries one, from the Arrow field metadata."""
    import pyarrow.parquet as pq

    schema = pq.read_schema(path)
    return {f.name: f.metadata[b"unit"].decode() for f in schema
            if f.metadata and b"unit" in f.metadata}


def parquet_metadata(path: str | os.PathLike) -> dict[str, str]:
    """Table-level key/value metadata of a Parquet file (without pandas' own entry)."""
    import pyarrow.parquet as pq

    meta = pq.read_schema(path).metadata or {}
    return {k.decode(): v.decode() for k, v in meta.items() if k != b"pandas"}


def write_text(text: str, path: str | os.PathLike) -> None:
    """Write text atomically (UTF-8)."""
    target, tmp = _atomic_target(path)
    try:
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, target)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def _json_default(obj: Any) -> Any:
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (np.floating,)):
        value = float(obj)
        return value if math.isfinite(value) else None
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")


def write_json(obj: Any, path: str | os.PathLike) -> None:
    """Write an object as indented JSON atomically."""
    write_text(json.dumps(obj, indent=2, sort_keys=True, default=_json_default) + "\n", path)


def copy_file(source: str | os.PathLike, target: str | os.PathLike) -> None:
    """Copy a file atomically (temporary file plus rename)."""
    import shutil

    target, tmp = _atomic_target(target)
    try:
        shutil.copyfile(source, tmp)
        os.replace(tmp, target)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def read_json(path: str | os.PathLike) -> Any:
    """Read a JSON file written by :func:`write_json`."""
    with open(path, encoding="utf-8") as fh:
        return json.load(fh)


def write_csv(frame: pd.DataFrame, path: str | os.PathLike) -> None:
    """Write a CSV table atomically."""
    target, tmp = _atomic_target(path)
    try:
        frame.to_csv(tmp, index=False)
        os.replace(tmp, target)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def save_arrays(arrays: Mapping[str, np.ndarray], path: str | os.PathLike) -> None:
    """Save named numpy arrays to an .npz file atomically."""
    target, tmp = _atomic_target(path)
    try:
        with open(tmp, "wb") as fh:
            np.savez(fh, **arrays)
        os.replace(tmp, target)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def load_arrays(path: str | os.PathLike) -> dict[str, np.ndarray]:
    """Load named numpy arrays from an .npz file."""
    with np.load(path, allow_pickle=False) as data:
        return {key: data[key] for key in data.files}


def start_log(path: str) -> None:
    """Send logging and stderr of an adapter process to its Snakemake log file."""
    import logging
    import sys
    import warnings

    Path(path).parent.mkdir(parents=True, exist_ok=True)
    stream = open(path, "a", encoding="utf-8")  # noqa: SIM115 - lives as long as the process
    sys.stderr = stream
    logging.basicConfig(stream=stream, level=logging.INFO, force=True,
                        format="%(asctime)s %(levelname)s %(message)s")
    logging.captureWarnings(True)
    warnings.simplefilter("default")


def end_job() -> None:
    """Leave an adapter process once all its outputs are written and closed.

    Flushes the log and the standard streams, then exits without the
    interpreter's teardown, which for a process holding pandas, pyarrow and
    scipy takes about 0.1 s: measurable on a re-run that revises one record,
    where two such jobs sit on the critical path. Call it as the last
    statement of an adapter only (nothing after it runs; no atexit handlers).
    """
    import logging
    import sys

    logging.shutdown()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):  # closed or broken stream: nothing left to save
            pass
    os._exit(0)
