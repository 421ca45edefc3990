"""Code versions derived from what the code imports (no hand-kept module lists).

Every cache key and every rule's code input rests on one question: which source
files can change the result of a stage? The answer is read from the code
itself. :func:`imported_modules` lists the ``lamellume`` modules (and sibling
adapter modules) a source file imports anywhere -- at the top, inside
functions, under ``TYPE_CHECKING`` -- and :func:`module_closure` follows those
imports transitively. A stage's code version is a digest of every file in its
closure plus the JSON schemas the library reads.

Why an import graph and not one digest of the whole library: with one digest,
editing the HTML page (``report``) would throw away every screened row and the
Keldysh table of a 10,000-record campaign. The graph is at module granularity
and counts imports inside functions as well, so it errs towards re-running:
a module that could run in a stage is always part of its key. The test
``tests/integration/test_code_keys.py`` checks, by running every job, that no
module a job actually loads is missing from its rule's declared code.

Sources are read through :mod:`lamellume.io` (this module opens no files).
"""

from __future__ import annotations

import ast
import functools
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable, Mapping

from lamellume import io

PACKAGE = "lamellume"


#: Version of what :func:`_scan` records (bump it when the scan changes): part of the memo's key.
SCAN_FORMAT = 1

#: File of the scan memo inside a library folder's ``__pycache__`` (see :func:`_library_scans`).
SCAN_MEMO = "lamellume-imports.json"


@dataclass(frozen=True)
class Scan:
    """What the import graph needs of one source: its import statements and declared data files.

    ``imports`` holds one ``(module, level, names)`` per import statement anywhere in the
    source: ``import a.b`` gives ``("a.b", 0, None)``, ``from ..a import b, c`` gives
    ``("a", 2, ("b", "c"))``. ``data_files`` is the module-level ``DATA_FILES`` tuple.
    """

    imports: tuple[tuple[str, int, tuple[str, ...] | None], ...]
    data_files: tuple[str, ...]

    def to_json(self) -> dict:
        return {"imports": [[m, level, list(names) if names is not None else None] for m, level, names in self.imports],
                "data_files": list(self.data_files)}

    @classmethod
    def from_json(cls, entry: dict) -> "Scan":
        imports = tuple((str(m), int(level), tuple(str(n) for n in names) if names is not None else None)
                        for m, level, names in entry["imports"])
        return cls(imports, tuple(str(name) for name in entry["data_files"]))


def _statements(tree: ast.AST) -> Iterable[ast.AST]:
    """Every statement of a syntax tree, at any depth (function bodies, branches, handlers).

    Import statements are statements, and statements sit only inside other statements
    (never inside expressions), so the walk need not enter expressions: a tenth of the
    nodes of a full :func:`ast.walk`, which made a third of Snakemake's start-up.
    """
    todo = [tree]
    while todo:
        node = todo.pop()
        yield node
        todo.extend(child for child in ast.iter_child_nodes(node)
                     if isinstance(child, (ast.stmt, ast.excepthandler, ast.match_case)))


#: Scans by source text: filled by :func:`_scan` and, from the on-disk memo, by :func:`_library_scans`.
_SCANNED: dict[str, Scan] = {}


def _scan(source: str) -> Scan:
    """The :class:`Scan` of a source (parsed once per process unless the memo holds it)."""
    scan = _SCANNED.get(source)
    if scan is None:
        tree = ast.parse(source)
        imports = []
        for node in _statements(tree):
            if isinstance(node, ast.Import):
                imports += [(alias.name, 0, None) for alias in node.names]
            elif isinstance(node, ast.ImportFrom):
                imports.append((node.module or "", node.level, tuple(alias.name for alias in node.names)))
        data_files: tuple[str, ...] = ()
        for node in tree.body:
            if isinstance(node, ast.Assign) and any(getattr(t, "id", None) == "DATA_FILES" for t in node.targets):
                data_files = tuple(str(name) for name in ast.literal_eval(node.value))
                break
        scan = _SCANNED[source] = Scan(tuple(imports), data_files)
    return scan


def imported_modules(source: str, local: Iterable[str] = ()) -> set[str]:
    """Names of the ``lamellume`` modules (and of the ``local`` top-level modules) a source imports.

    Parameters
    ----------
    source : Python source text.
    local : names of top-level modules living beside the source (adapter helpers such as
        ``adapter_args``); imports of them are reported as ``"local:<name>"``.

    Returns module names without the package prefix (``"io"``, ``"screen"``); importing the
    package itself is ``"__init__"``. Every import statement counts, wherever it sits.
    """
    return set(_imported_modules(source, frozenset(local)))


@functools.lru_cache(maxsize=None)
def _imported_modules(source: str, local: frozenset[str]) -> frozenset[str]:
    found: set[str] = set()
    for module, level, names in _scan(source).imports:
        parts = module.split(".") if module else []
        if level:  # relative import inside the package: from .a import b / from . import a, b
            found.add("__init__")
            found.update(parts[:1] or names)
        elif parts and parts[0] == PACKAGE:  # import lamellume.a / from lamellume(.a) import ...
            found.add("__init__")
            found.update(parts[1:2] or (() if names is None else names))
        elif module in local:
            found.add(f"local:{module}")
    return frozenset(found)


def declared_data_files(source: str) -> list[str]:
    """The module-level ``DATA_FILES`` tuple of a source (files the module reads at run time,
    relative to the library folder, e.g. the page's templates), read without importing it."""
    return list(_scan(source).data_files)


def module_closure(entry: str, sources: Mapping[str, str], local: Iterable[str] = ()) -> frozenset[str]:
    """Every module reachable from ``entry`` through imports (``entry`` included).

    ``sources`` maps module names (``"io"``, ``"local:adapter_args"``, ...) to their text;
    an imported name without a source (a name imported from a module, not a module) is
    dropped.
    """
    seen: set[str] = set()
    todo = [entry]
    while todo:
        name = todo.pop()
        if name in seen or name not in sources:
            continue
        seen.add(name)
        todo.extend(imported_modules(sources[name], local) - seen)
    return frozenset(seen)


@functools.cache
def _sources(library: Path) -> dict[str, str]:
    sources = io.library_sources(library)
    _library_scans(library, sources)
    return sources


def _library_scans(library: Path, sources: Mapping[str, str]) -> None:
    """Fill the scans of a library's modules from their memo, keyed by content.

    Parsing the library costs about 0.35 s CPU, paid by Snakemake on every run (the rules'
    code inputs) and by every job that stamps a code version. The scans are therefore
    kept, as Python keeps bytecode, in the library's ``__pycache__`` folder
    (:data:`SCAN_MEMO`): one entry per module, keyed by a SHA-256 of the scan format and
    the module's text, so an entry is used only for the very text it was made from. The
    memo is rewritten when a module was parsed (not when Python is told not to write
    bytecode, nor where the folder is read-only); a missing or unreadable memo means
    parsing, never a different answer.
    """
    memo_path = Path(library) / "__pycache__" / SCAN_MEMO
    memo = io.read_json_or_none(memo_path)
    entries = memo.get("entries", {}) if isinstance(memo, dict) else {}
    kept = {}
    for text in sources.values():
        key = io.sha256_bytes(f"{SCAN_FORMAT}\0{text}".encode("utf-8"))
        if text not in _SCANNED and key in entries:
            try:
                _SCANNED[text] = Scan.from_json(entries[key])
            except (KeyError, TypeError, ValueError):  # a damaged entry: parsed instead
                pass
        kept[key] = _scan(text).to_json()
    if kept != entries and not sys.dont_write_bytecode:
        io.write_json_quietly({"format": SCAN_FORMAT, "entries": kept}, memo_path)


def library_modules(library: Path = io.LIBRARY_DIR) -> list[str]:
    """Names of all library modules (``"__init__"``, ``"io"``, ...)."""
    return sorted(_sources(Path(library)))


def stage_modules(entry: str, library: Path = io.LIBRARY_DIR) -> frozenset[str]:
    """Library modules a stage whose code starts at library module ``entry`` can run
    (``library``: the package folder, by default this one)."""
    return module_closure(entry, _sources(Path(library))) | {"__init__"}  # importing any module runs __init__


def code_version(entry: str, library: Path = io.LIBRARY_DIR) -> str:
    """Short digest of a stage's code: the sources of :func:`stage_modules`, the data files
    they declare and the schemas (the ``schemas`` folder beside ``library``)."""
    library = Path(library)
    sources = _sources(library)
    modules = stage_modules(entry, library)
    parts = {f"{m}.py": sources[m] for m in modules}
    for m in sorted(modules):
        for name in declared_data_files(sources[m]):
            parts[name] = io.read_source(library / name)
    parts.update({f"schemas/{name}": text for name, text in io.schema_sources(library.parent / "schemas").items()})
    return io.canonical_json_hash(parts)[:16]


def keldysh_table_build(library: Path = io.LIBRARY_DIR) -> dict:
    """What decides the numbers of the Rytova-Keldysh table (``keldysh.build_table()`` on its
    default grid): the source of every library module the build can run (the import closure of
    ``keldysh``, found as every rule's code inputs are) and the versions of numpy and scipy,
    whose LAPACK bisection and spline fit compute it. The number of worker processes is left
    out: the grid points are solved apart, so it never changes a value.

    Returns ``{"key": <hex digest of the rest>, "modules": [...], "numpy": ..., "scipy": ...}``.
    """
    from importlib import metadata

    sources = _sources(Path(library))
    modules = sorted(stage_modules("keldysh", library))
    parts = {"modules": [f"{m}.py" for m in modules], "numpy": metadata.version("numpy"),
             "scipy": metadata.version("scipy")}
    key = io.canonical_json_hash({**parts, "sources": {m: sources[m] for m in modules}})
    return {"key": key, **parts}


def adapter_files(adapter: str | Path, library: Path = io.LIBRARY_DIR) -> list[str]:
    """Source files behind an adapter script: itself, the sibling helpers it imports, every
    library module in their import closure, the data files those modules declare
    (:func:`declared_data_files`) and the schemas (paths; the adapter first)."""
    adapter, library = Path(adapter), Path(library)
    siblings = {p.stem: p for p in adapter.parent.glob("*.py")}
    sources = {f"local:{n}": io.read_source(p) for n, p in siblings.items()}
    sources.update(_sources(library))
    reached = module_closure(f"local:{adapter.stem}", sources, local=siblings) - {f"local:{adapter.stem}"}
    files = [str(siblings[m.split(":", 1)[1]]) for m in reached if m.startswith("local:")]
    modules = [m for m in reached if not m.startswith("local:")]
    files += [str(library / f"{m}.py") for m in modules]
    files += [str(library / name) for m in modules for name in declared_data_files(sources[m])]
    files += [str(p) for p in io.schema_files(library.parent / "schemas")]
    return [str(adapter)] + sorted(files)
