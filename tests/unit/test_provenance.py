"""Import-graph code versions (lamellume.provenance): what counts as an import."""

from __future__ import annotations

import textwrap

import pytest

from lamellume import provenance


@pytest.mark.parametrize("source, expected", [
    ("import numpy as np", set()),
    ("from lamellume import io, screen", {"__init__", "io", "screen"}),
    ("from lamellume.keldysh import KeldyshTable", {"__init__", "keldysh"}),
    ("import lamellume.units", {"__init__", "units"}),
    ("from lamellume import layers as layer_model", {"__init__", "layers"}),
    ("from . import masses", {"__init__", "masses"}),
    ("from .bandfit import fit", {"__init__", "bandfit"}),
    # imports inside functions and under TYPE_CHECKING count: they can run
    ("def f():\n    from lamellume import ranking\n    return ranking", {"__init__", "ranking"}),
    ("if TYPE_CHECKING:\n    from lamellume.structure import LayerGeometry", {"__init__", "structure"}),
    ("import adapter_args", {"local:adapter_args"}),
])
def test_imported_modules(source, expected):
    assert provenance.imported_modules(source, local={"adapter_args"}) == expected


def test_closure_follows_imports_transitively_and_ignores_names():
    sources = {
        "a": "from lamellume import b, CONSTANT",
        "b": textwrap.dedent("""
            def g():
                from lamellume import c
            """),
        "c": "import numpy",
        "d": "from lamellume import a",
    }
    assert provenance.module_closure("a", sources) == {"a", "b", "c"}
    assert provenance.module_closure("d", sources) == {"a", "b", "c", "d"}
    assert provenance.module_closure("c", sources) == {"c"}


def test_every_stage_includes_the_package_init():
    for module in provenance.library_modules():
        assert "__init__" in provenance.stage_modules(module)


def test_scan_memo_answers_as_a_parse_and_follows_edits(tmp_path, monkeypatch):
    """The import scans kept in the library's __pycache__ give the same graph as parsing, are
    used only for the text they were made from, and a damaged memo only means parsing."""
    import shutil

    from lamellume import io

    monkeypatch.setattr(provenance.sys, "dont_write_bytecode", False)
    library = tmp_path / "lamellume"
    shutil.copytree(io.LIBRARY_DIR, library, ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copytree(io.SCHEMA_DIR, tmp_path / "schemas")
    memo = library / "__pycache__" / provenance.SCAN_MEMO

    def fresh(parse: bool):
        """Graph and version as a new process sees them (with or without the parses of this one)."""
        provenance._sources.cache_clear()
        provenance._imported_modules.cache_clear()
        if parse:
            provenance._SCANNED.clear()
        return provenance.stage_modules("keldysh", library), provenance.code_version("pipeline", library)

    parsed = fresh(parse=True)
    assert memo.is_file()
    with monkeypatch.context() as m:  # the second time from the memo alone: nothing parsed
        m.setattr(provenance.ast, "parse", lambda *a, **k: pytest.fail("parsed despite the memo"))
        assert fresh(parse=True) == parsed
    with open(library / "keldysh.py", "a") as fh:  # an edit that adds an import: seen at once
        fh.write("\nfrom lamellume import report  # noqa\n")
    modules, version = fresh(parse=False)
    assert "report" in modules and version != parsed[1]
    memo.write_text("{not json")  # damaged: parsed again, same answer
    assert fresh(parse=True) == (modules, version)
    provenance._sources.cache_clear()
    provenance._imported_modules.cache_clear()
