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
import stat
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, Mapping

if TYPE_CHECKING:
    import numpy as np
    import pandas as pd
    import pyarrow as pa

# numpy, pandas and pyarrow are imported inside the functions that need them: the
# Snakefile imports this module to list the campaign, and Snakemake's start-up
# should not pay for them (numpy alone: about 0.1 s CPU on every run).

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
    """A record file as read: its bytes' hash and either the parsed object or a reason.

    ``error_field`` names where the problem is: ``(file)`` for the file as a whole,
    or the JSON path of a key given twice or of text that cannot be stored.
    """

    path: str
    sha256: str
    data: Any = None
    error: str | None = None
    error_field: str = "(file)"


def sha256_bytes(data: bytes) -> str:
    """Hex SHA-256 of a byte string."""
    return hashlib.sha256(data).hexdigest()


def campaign_history_dir(root: str | os.PathLike, campaign: str | os.PathLike) -> Path:
    """Folder of one campaign's run history under ``root`` (``results/history``).

    Named after the campaign folder (its resolved path's last part; letters, digits,
    ``.``, ``-``, ``_`` kept, anything else ``_``): the same campaign reached by any
    spelling of its path (relative, absolute, through a link) keeps one history, and
    the change report compares a campaign only with its own previous run. The name
    alone decides, so a campaign copied or moved to another place keeps its history;
    two campaigns need folders of different names.
    """
    folder = Path(campaign).resolve()
    name = "".join(c if c.isascii() and (c.isalnum() or c in "._-") else "_" for c in folder.name)
    return Path(root) / (name.lstrip(".") or "campaign")


def canonical_json_hash(obj: Any) -> str:
    """Hex SHA-256 of a JSON-serialisable object with sorted keys (for config hashes)."""
    text = json.dumps(obj, sort_keys=True, separators=(",", ":"), default=str)
    return sha256_bytes(text.encode("utf-8"))


# ---------------------------------------------------------------------------------------------
# Reading campaign files: regular files only, never more than a limit
# ---------------------------------------------------------------------------------------------

def _not_regular_reason(mode: int) -> str | None:
    """Why a file of this ``st_mode`` is not read (None for a regular file)."""
    if stat.S_ISREG(mode):
        return None
    if stat.S_ISDIR(mode):
        return "is a directory, not a file"
    if stat.S_ISFIFO(mode):
        return "is a named pipe (FIFO), not a regular file; not opened"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "is a device, not a regular file; not opened"
    if stat.S_ISSOCK(mode):
        return "is a socket, not a regular file; not opened"
    return "is not a regular file; not opened"


def file_kind_problem(path: str | os.PathLike) -> str | None:
    """Why ``path`` cannot be read as a campaign file, from its metadata alone (None: it can).

    Symbolic links are followed; a link whose target is missing is reported as
    dangling. Nothing is opened.
    """
    try:
        st = os.stat(path)
    except FileNotFoundError:
        if os.path.islink(path):
            try:
                target = os.readlink(path)
            except OSError:
                target = "?"
            return f"is a dangling symbolic link (its target {target!r} does not exist)"
        return "file not found" + _case_sibling_hint(path)
    except OSError as exc:  # a link loop, a permission problem on the folder
        return f"cannot read file: {exc.strerror or exc}"
    return _not_regular_reason(st.st_mode)


def _case_sibling_hint(path: str | os.PathLike) -> str:
    """For a missing file, a note naming a file beside it whose name differs only in letter
    case (file names are case-sensitive here, unlike on some laptops); else ''."""
    folder, name = os.path.split(os.fspath(path))
    try:
        names = os.listdir(folder or ".")
    except OSError:
        return ""
    twins = sorted(n for n in names if n != name and n.casefold() == name.casefold())
    if not twins:
        return ""
    return f" ({printable_name(twins[0])!r} exists; file names are case-sensitive)"


def read_limited(path: str | os.PathLike, limit: int) -> tuple[bytes | None, str | None, int]:
    """At most ``limit`` bytes of a regular file: ``(data, None, size)`` or ``(None, reason, size)``.

    Only regular files (or links to them) are opened, non-blocking, and the kind
    is checked again on the open descriptor, so a named pipe never blocks and a
    device is never read. At most ``limit + 1`` bytes are read whatever size the
    file reports, so a file that grows (or lies about its size) cannot be read
    without bound. ``size`` is the number of bytes read (``limit + 1`` means
    "more than the limit"); 0 when nothing was read.
    """
    reason = file_kind_problem(path)
    if reason:
        return None, reason, 0
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0) | getattr(os, "O_CLOEXEC", 0)
    try:
        fd = os.open(path, flags)
    except OSError as exc:
        return None, f"cannot read file: {exc.strerror or exc}", 0
    try:
        st = os.fstat(fd)
        reason = _not_regular_reason(st.st_mode)  # replaced between the check and the open
        if reason:
            return None, reason, 0
        chunks, remaining = [], limit + 1
        while remaining > 0:
            block = os.read(fd, min(remaining, 1 << 20))
            if not block:
                break
            chunks.append(block)
            remaining -= len(block)
    except OSError as exc:
        return None, f"cannot read file: {exc.strerror or exc}", 0
    finally:
        os.close(fd)
    data = b"".join(chunks)
    if len(data) > limit:
        shown = f"is {st.st_size} bytes" if st.st_size > limit else "has more bytes than it reports"
        return None, f"file {shown}, larger than the {limit}-byte limit", len(data)
    return data, None, len(data)


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


class _Object(dict):
    """A JSON object as parsed, remembering keys given more than once (in order)."""

    __slots__ = ("repeated",)


def _object_pairs(pairs: list[tuple[str, Any]]) -> dict:
    obj = _Object(pairs)
    obj.repeated = []
    if len(obj) != len(pairs):
        seen: set[str] = set()
        for key, _ in pairs:
            if key in seen and key not in obj.repeated:
                obj.repeated.append(key)
            seen.add(key)
    return obj


def _json_path(parts: list) -> str:
    """``a.b[2].c`` for a JSON path; ``(record)`` for the empty path.

    The same rendering as :func:`lamellume.contract.format_path` (this module
    imports no other library module); keys that are not plain identifiers are
    shown with ``repr`` escapes, so the path itself is always storable text.
    """
    out = ""
    for part in parts:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            text = part if part.isidentifier() or part.isdigit() else repr(part)
            text = text.encode("utf-8", "backslashreplace").decode("utf-8")
            out += f".{text}" if out else text
    return out or "(record)"


def _content_problem(node: Any, path: list) -> tuple[str, str] | None:
    """The first key given twice or text Arrow cannot store, as ``(field, reason)``, depth first.

    Text that is not a sequence of Unicode scalar values (a lone UTF-16 surrogate,
    from an escape such as ``\\ud800``) cannot be written as UTF-8, so it could not
    be stored in any table.
    """
    stack = [(node, path)]
    while stack:
        value, where = stack.pop()
        if isinstance(value, dict):
            for key in getattr(value, "repeated", ()):
                return _json_path(where + [key]), (
                    "key given more than once in the same object (JSON readers disagree which value "
                    "wins); keep one")
            for key in value:
                bad = _unstorable_text(key)
                if bad:
                    return _json_path(where), f"a key {bad}"
            stack.extend((v, where + [k]) for k, v in reversed(list(value.items())))
        elif isinstance(value, list):
            stack.extend((v, where + [i]) for i, v in reversed(list(enumerate(value))))
        elif isinstance(value, str):
            bad = _unstorable_text(value)
            if bad:
                return _json_path(where), f"text {bad}"
    return None


def _unstorable_text(text: str) -> str | None:
    """Why ``text`` cannot be stored as UTF-8 (None when it can)."""
    try:
        text.encode("utf-8")
    except UnicodeEncodeError as exc:
        code = ord(text[exc.start])
        return (f"holds the code point U+{code:04X} at character {exc.start + 1}, a lone UTF-16 surrogate "
                "that is not a character and cannot be stored")
    return None


def read_record(path: str | os.PathLike) -> RawRecord:
    """Read and parse one JSON record file, never raising for bad content.

    Files that are not regular files (directories, named pipes, devices, sockets,
    dangling links), empty, oversized, non-UTF-8 and syntactically broken files,
    non-finite numbers (NaN, Infinity), keys given twice in one object and text
    that cannot be stored (lone surrogates) come back with ``error`` set to a
    reason (and ``error_field`` to the JSON path where there is one).
    """
    path = str(path)
    raw, reason, _ = read_limited(path, MAX_RECORD_BYTES)
    if raw is None:
        # nothing (or too much) was read: the reason stands in for the content in the hash
        return RawRecord(path, sha256_bytes(f"not read: {reason}".encode("utf-8", "backslashreplace")),
                         error=reason)
    digest = sha256_bytes(raw)
    if not raw.strip():
        return RawRecord(path, digest, error="file is empty")
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        return RawRecord(path, digest, error="UTF-16 text (it starts with a UTF-16 byte-order mark); save it as UTF-8")
    nul = raw.find(b"\x00")
    if nul >= 0:
        return RawRecord(path, digest, error=f"contains a NUL byte (at byte {nul}): binary data or UTF-16 text, "
                                             "not UTF-8 JSON")
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        return RawRecord(path, digest, error=f"not UTF-8 text (byte {exc.start}: {exc.reason})")
    if text.startswith("\ufeff"):
        text = text[1:]
    repeated: list[bool] = []

    def object_pairs(pairs: list[tuple[str, Any]]) -> dict:
        obj = dict(pairs)
        if len(obj) != len(pairs):
            repeated.append(True)
        return obj

    try:
        data = json.loads(text, parse_constant=_reject_constant, parse_int=_parse_int,
                          object_pairs_hook=object_pairs)
        if repeated:  # parsed again, each object remembering its keys given twice (for the message)
            data = json.loads(text, parse_constant=_reject_constant, parse_int=_parse_int,
                              object_pairs_hook=_object_pairs)
    except json.JSONDecodeError as exc:
        return RawRecord(path, digest, error=f"invalid JSON at line {exc.lineno} column {exc.colno}: {exc.msg}")
    except RecursionError:
        return RawRecord(path, digest, error="invalid JSON: arrays or objects nested too deeply")
    except ValueError as exc:
        if "integer string conversion" in str(exc):  # CPython's guard against huge integers
            return RawRecord(path, digest, error="invalid JSON: an integer with more than "
                                                 f"{sys.get_int_max_str_digits()} digits")
        return RawRecord(path, digest, error=f"invalid JSON: {exc}")
    # Decoded UTF-8 holds no lone surrogate; only a \\u escape can make one. Without a
    # repeated key and without an escape there is nothing for the walk to find.
    problem = _content_problem(data, []) if repeated or "\\u" in text else None
    if problem:
        return RawRecord(path, digest, error=problem[1], error_field=problem[0])
    return RawRecord(path, digest, data=data)


def read_text_limited(path: str | os.PathLike, limit: int = MAX_CIF_BYTES) -> tuple[bytes | None, str | None]:
    """Bytes of a regular file, or a reason when it is missing, not a regular file,
    unreadable or too large (see :func:`read_limited`)."""
    data, reason, _ = read_limited(path, limit)
    return data, reason


def printable_name(name: str) -> str:
    """A file name as storable text: bytes that are not UTF-8 (kept by Python as lone
    surrogates) are shown as ``\\xNN`` escapes."""
    return name.encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")


#: Campaign sub-folders and the file suffix each one holds.
CAMPAIGN_FOLDERS = {"entries": ".json", "structures": ".cif"}


def skip_reason(name: str, kind: str) -> str | None:
    """Why a listed campaign file is skipped instead of read (None: it is read).

    A file is read when its name ends in the folder's suffix exactly (``.json``
    in entries/, ``.cif`` in structures/) and does not start with a dot. Files
    whose names come close (a near miss: hidden, a suffix in other letter case,
    a suffix followed by more text) are listed but skipped with this reason,
    so the user sees them; other files are not listed at all.
    """
    suffix = CAMPAIGN_FOLDERS[kind]
    if printable_name(name) != name:
        return "file name is not valid UTF-8 text; rename the file"
    if name.startswith("."):
        return "hidden file (name starts with '.'); rename it without the dot to have it read"
    if not name.endswith(suffix):
        low = name.casefold()
        if low.endswith(suffix):
            return (f"suffix {name[-len(suffix):]!r} is not {suffix!r} (suffixes are case-sensitive); "
                    f"rename it to end in {suffix!r} to have it read")
        return f"name does not end in {suffix!r} (a copy or backup?); not read"
    return None


def _near_miss(name: str, suffix: str) -> bool:
    """A name close enough to a campaign file's to be listed as skipped (see :func:`skip_reason`)."""
    return suffix in name.casefold()


#: Largest file read per campaign folder (bytes).
CAMPAIGN_LIMITS = {"entries": MAX_RECORD_BYTES, "structures": MAX_CIF_BYTES}


def campaign_file_digest(path: str | os.PathLike, kind: str) -> tuple[str | None, str | None]:
    """``(hex SHA-256, None)`` of a listed campaign file, or ``(None, reason)`` when it is
    skipped (:func:`skip_reason`) or cannot be read (:func:`read_limited`). Never raises."""
    reason = skip_reason(os.path.basename(path), kind)
    if reason:
        return None, reason
    data, reason, _ = read_limited(path, CAMPAIGN_LIMITS[kind])
    return (None, reason) if data is None else (sha256_bytes(data), None)


def campaign_listing(campaign: str | os.PathLike, kind: str) -> list[tuple[str, int, int]]:
    """Files of one campaign folder as ``(name, size in bytes, modification time in ns)``.

    ``kind`` is ``"entries"`` (``*.json``) or ``"structures"`` (``*.cif``). Names
    that end in the suffix are listed, and so are near misses (hidden files,
    ``x.JSON``, ``x.json.bak``: see :func:`skip_reason`), which the screen
    reports as skipped; other files are not listed. A missing folder lists
    nothing. Nothing is opened: size and time come from ``stat`` (links
    followed; a dangling link is listed with size and time -1), so a directory,
    a named pipe or a device is listed like any file and the screen gives it a
    reject row. Sorted by name. One ``scandir`` pass: about 10 ms per 10,000 files.
    """
    suffix = CAMPAIGN_FOLDERS[kind]
    try:
        it = os.scandir(Path(campaign) / kind)
    except (FileNotFoundError, NotADirectoryError):
        return []
    rows = []
    with it:
        for entry in it:
            if not entry.name.endswith(suffix) and not _near_miss(entry.name, suffix):
                continue
            try:
                st = entry.stat(follow_symlinks=True)
                rows.append((entry.name, int(st.st_size), int(st.st_mtime_ns)))
            except OSError:
                rows.append((entry.name, -1, -1))
    return sorted(rows)


def calculation_listing(campaign: str | os.PathLike) -> list[tuple[str, int, int]]:
    """Files of the compound folders ``<campaign>/calculations/<id>/`` as ``(id/name, size, mtime_ns)``.

    Hidden files and folders are skipped; no calculations folder lists nothing.
    Sorted. The workflow keeps this listing (per shard) as a content-addressed
    input of the import jobs, so a revised calculation file re-runs its shard.
    """
    root = Path(campaign) / "calculations"
    rows = []
    try:
        folders = sorted(e.name for e in os.scandir(root) if e.is_dir() and not e.name.startswith("."))
    except (FileNotFoundError, NotADirectoryError):
        return []
    for name in folders:
        with os.scandir(root / name) as it:
            for entry in it:
                if entry.name.startswith(".") or not entry.is_file():
                    continue
                st = entry.stat()
                rows.append((f"{name}/{entry.name}", int(st.st_size), int(st.st_mtime_ns)))
    return sorted(rows)


def snapshot_json(folder: str | os.PathLike, prefix: str, content: Any) -> str:
    """Write ``content`` to ``folder/<prefix>-<digest>.json`` (once) and return that path.

    The file name carries a digest of the content, so a rule that takes the file
    as input re-runs exactly when the content changes: the name changes (Snakemake's
    ``input`` trigger) and the new file is newer than the rule's outputs (its
    ``mtime`` trigger). The workflow keeps job settings and campaign listings this
    way instead of in rule ``params``.

    Nothing is ever removed or rewritten here (a dry run calls this too, possibly
    while a real run reads these files): snapshots the current run does not use are
    removed by :func:`remove_snapshots_except`, from a real run holding Snakemake's
    lock, so that returning to an earlier content later writes a fresh (newer) file.
    """
    text = json.dumps(content, sort_keys=True, separators=(",", ":"), default=str) + "\n"
    folder = Path(folder)
    path = folder / f"{prefix}-{sha256_bytes(text.encode('utf-8'))[:16]}.json"
    if not path.exists():
        write_text(text, path)
    return str(path)


def remove_snapshots_except(folder: str | os.PathLike, keep: set[str]) -> list[str]:
    """Remove the snapshots (``<prefix>-<16 hex digits>.json``) in ``folder`` not in ``keep``.

    Call only from a real run that holds the workflow's lock (Snakemake's ``onstart``),
    with ``keep`` the snapshots that run uses. Returns the names removed.
    """
    import re

    pattern = re.compile(r".+-[0-9a-f]{16}\.json")
    keep = {os.path.abspath(p) for p in keep}
    removed = []
    for old in Path(folder).glob("*.json"):
        if pattern.fullmatch(old.name) and os.path.abspath(old) not in keep:
            try:
                old.unlink()
                removed.append(old.name)
            except FileNotFoundError:
                pass
    return sorted(removed)


def load_schema(name: str) -> dict:
    """Load a JSON schema shipped in workflow/schemas by file name."""
    with open(SCHEMA_DIR / name, encoding="utf-8") as fh:
        return json.load(fh)


def read_library_text(relative: str) -> str:
    """A text file shipped inside the library folder (the page's templates), by relative path."""
    return (LIBRARY_DIR / relative).read_text(encoding="utf-8")


def library_paths() -> list[Path]:
    """Every library module and page template file (what :func:`library_digest` hashes)."""
    return sorted(p for p in [*LIBRARY_DIR.glob("*.py"), *(LIBRARY_DIR / "templates").glob("*")] if p.is_file())


def library_digest(modules: list[str] | None = None) -> str:
    """Short content hash of the library sources (all modules, or the named ones).

    Used as the code version of every result row and as part of cache keys, so
    a change of the physics code invalidates cached results. Without ``modules``
    the page's template files (``templates/``) count too.
    """
    if modules:
        names = sorted(modules)
    else:  # every module and the page's template files
        names = sorted(str(p.relative_to(LIBRARY_DIR)) for p in library_paths())
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

    from lamellume import tables

    table = frame if isinstance(frame, pa.Table) else pa.Table.from_pandas(frame, preserve_index=False)
    # An empty object column has no type (Arrow: null); all such columns here hold text.
    table = table.cast(pa.schema([f.with_type(pa.large_string()) if pa.types.is_null(f.type) else f
                                  for f in table.schema], metadata=table.schema.metadata))
    # Unit, description and type of every declared column come from lamellume.tables;
    # ``units``/``descriptions`` only fill in columns it does not declare.
    names = table.schema.names
    units = {**units, **tables.units_for(names)}
    descriptions = {**descriptions, **tables.descriptions_for(names)}
    fields = []
    for f in table.schema:
        meta = dict(f.metadata or {})
        if f.name in units:
            meta[b"unit"] = units[f.name].encode()
        if f.name in descriptions:
            meta[b"description"] = descriptions[f.name].encode()
        declared = tables.lookup(f.name)
        if declared is not None:
            f = f.with_type(_arrow_type(declared.dtype))
        fields.append(f.with_metadata(meta) if meta else f)
    schema_meta = dict(table.schema.metadata or {})
    for key, value in (table_metadata or {}).items():
        schema_meta[key.encode()] = str(value).encode()
    return table.cast(pa.schema(fields, metadata=schema_meta))


def _arrow_type(dtype: str):
    """Arrow type of a dtype name of :mod:`lamellume.tables`."""
    import pyarrow as pa

    return {"string": pa.large_string(), "float64": pa.float64(), "int16": pa.int16(), "Int16": pa.int16(),
            "int32": pa.int32(), "int64": pa.int64(), "bool": pa.bool_()}[dtype]


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
    np = sys.modules.get("numpy")  # a numpy value implies numpy is loaded: never imported here
    if np is None:
        if isinstance(obj, Path):
            return str(obj)
        raise TypeError(f"not JSON serialisable: {type(obj).__name__}")
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


def read_json_or_none(path: str | os.PathLike) -> Any:
    """Content of a JSON file, or None when it is missing or unreadable (for a cache that is rebuilt then)."""
    try:
        with open(path, encoding="utf-8") as fh:
            return json.load(fh)
    except (OSError, ValueError):
        return None


def write_json_quietly(obj: Any, path: str | os.PathLike) -> bool:
    """:func:`write_json` for a cache that can be rebuilt: False instead of an error when the
    folder cannot be written (a read-only installation, a race with another writer)."""
    try:
        write_json(obj, path)
    except OSError:
        return False
    return True


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


#: Leading characters that make a spreadsheet read a cell as a formula or command.
FORMULA_TRIGGERS = ("=", "+", "-", "@", "\t", "\r")


def spreadsheet_safe_text(value: Any) -> Any:
    """A text cell neutralised for spreadsheets: a single quote before a leading
    ``=``, ``+``, ``-``, ``@``, tab or carriage return. Anything else (numbers,
    missing values, other text) is returned unchanged.

    References
    ----------
    OWASP, "CSV Injection" (common practice for CSV handed to spreadsheet users).
    """
    if isinstance(value, str) and value.startswith(FORMULA_TRIGGERS):
        return "'" + value
    return value


def spreadsheet_safe(frame: pd.DataFrame) -> pd.DataFrame:
    """``frame`` with every text cell passed through :func:`spreadsheet_safe_text`.

    Numeric and boolean columns are left as they are, so numbers stay numbers
    (a negative value is written as ``-0.5``, not as text).
    """
    from pandas.api.types import is_bool_dtype, is_numeric_dtype

    text = [c for c in frame.columns if not (is_numeric_dtype(frame[c]) or is_bool_dtype(frame[c]))]
    if not text:
        return frame
    out = frame.copy()
    for c in text:
        out[c] = out[c].map(spreadsheet_safe_text)
    return out


def write_csv(frame: pd.DataFrame, path: str | os.PathLike) -> None:
    """Write a CSV table atomically, safe for spreadsheets (:func:`spreadsheet_safe`).

    Every CSV the workflow writes for people goes through here.
    """
    target, tmp = _atomic_target(path)
    try:
        spreadsheet_safe(frame).to_csv(tmp, index=False)
        os.replace(tmp, target)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def save_arrays(arrays: Mapping[str, np.ndarray], path: str | os.PathLike) -> None:
    """Save named numpy arrays to an .npz file atomically."""
    import numpy as np

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
    import numpy as np

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

    First it logs the job's CPU seconds and peak memory (the process's own
    accounting; the sharded rules carry no ``benchmark:`` directive, see
    DEVELOPERS.md, "State outside the DAG, and why").
    """
    import logging
    import sys

    try:
        import resource
    except ImportError:  # not on this platform: nothing to log
        pass
    else:
        usage = resource.getrusage(resource.RUSAGE_SELF)
        peak_bytes = usage.ru_maxrss * (1 if sys.platform == "darwin" else 1024)  # macOS counts bytes, Linux KiB
        logging.getLogger("lamellume").info("job resources: %.2f s CPU (user + system), peak memory %.0f MiB",
                                            usage.ru_utime + usage.ru_stime, peak_bytes / 2**20)
    logging.shutdown()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):  # closed or broken stream: nothing left to save
            pass
    os._exit(0)
