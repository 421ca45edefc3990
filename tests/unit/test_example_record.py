"""inputs/example-record.md: its JSON block is a valid record, and its annotations hold."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from lamellume import ingest

REPO = Path(__file__).resolve().parents[2]


def _record() -> dict:
    text = (REPO / "inputs" / "example-record.md").read_text()
    return json.loads(text.split("```json\n", 1)[1].split("```", 1)[0])


def test_example_record_passes_every_check(checker):
    record = _record()
    assert checker.check(record, stem="example-0001", structure_problem=lambda name: None) == []


def test_example_band_samples_give_the_masses_the_text_states():
    # the annotation: E = 1.0 + (hbar^2/2m_e) (k_x^2 / 0.25 + k_y^2 / 0.30), i.e. 0.25 and 0.30 m_e
    # (by hand from the sample energies; 3.81 eV Angstrom^2 = hbar^2 / 2 m_e, from memory)
    norm = ingest.normalize(_record(), source_file="example-0001.json", input_hash="x", max_layers=2,
                            geometry=None, structure_hash=None, non_layered="warn", reconcile_rel_tol=0.05)
    q = [v for v in norm.valleys if v["label"] == "Q"][0]
    np.testing.assert_allclose([1 / q["inv_mass_xx"], 1 / q["inv_mass_yy"]], [0.25, 0.30], rtol=1e-3)
    assert abs(q["inv_mass_xy"]) < 1e-3
