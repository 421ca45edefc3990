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
