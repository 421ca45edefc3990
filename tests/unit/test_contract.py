"""The input contract: one bad-input case per rule, each message naming the field.

File names are added by the shard job (see test_pipeline_rejects_name_file_and_field).
"""

from __future__ import annotations

import copy
import json
import math

import numpy as np
import pytest

from lamellume import io


def _set(path, value):
    def mutate(rec):
        obj = rec
        for key in path[:-1]:
            obj = obj[key]
        if value is _DELETE:
            del obj[path[-1]]
        else:
            obj[path[-1]] = value
    return mutate


_DELETE = object()

# (case, mutation, expected field, words expected in the reason)
CASES = [
    ("missing id", _set(["id"], _DELETE), "(record)", "'id' is a required property"),
    ("unsafe id", _set(["id"], "../etc"), "id", "does not match"),
    ("markup id", _set(["id"], "<b>x</b>"), "id", "does not match"),
    ("id differs from file", _set(["id"], "fixture-b"), "id", "differs from the file name 'fixture-a.json'"),
    ("wrong format tag", _set(["record_format"], "v0"), "record_format", "was expected"),
    ("unknown field", _set(["colour"], "red"), "(record)", "Additional properties"),
    ("string mass", _set(["valleys", 0, "mass", "isotropic_me"], "0.5"), "valleys[0].mass.isotropic_me",
     "is not of type 'number'"),
    ("zero mass", _set(["valleys", 0, "mass", "isotropic_me"], 0.0), "valleys[0].mass.isotropic_me", "<= 0"),
    ("negative mass", _set(["valleys", 2, "mass", "isotropic_me"], -0.3), "valleys[2].mass.isotropic_me", "<= 0"),
    ("absurd mass", _set(["valleys", 2, "mass", "isotropic_me"], 5e3), "valleys[2].mass.isotropic_me", "100"),
    ("bad principal", _set(["valleys", 3, "mass", "principal_me"], [0.6, -1.0]), "valleys[3].mass.principal_me[1]",
     "<= 0"),
    ("two mass forms", _set(["valleys", 0, "mass", "principal_me"], [0.5, 0.6]), "valleys[0].mass",
     "exactly one in-plane mass form"),
    ("mass and samples", _set(["valleys", 0, "band_samples"], {"k_per_angstrom": [[0, 0]], "energy_ev": [0]}),
     "valleys[0]", "exactly one of 'mass' or 'band_samples'"),
    ("asymmetric tensor", _set(["dielectric", "electronic"], [[10, 1, 0], [0, 10, 0], [0, 0, 5]]),
     "dielectric.electronic", "not symmetric"),
    ("indefinite tensor", _set(["dielectric", "electronic"], [[10, 0, 0], [0, -2, 0], [0, 0, 5]]),
     "dielectric.electronic", "positive definite"),
    ("eigenvalue below one", _set(["dielectric", "electronic"], [[10, 0, 0], [0, 0.7, 0], [0, 0, 5]]),
     "dielectric.electronic", "< 1"),
    ("absurd tensor", _set(["dielectric", "electronic"], [[1e4, 0, 0], [0, 1e4, 0], [0, 0, 5]]),
     "dielectric.electronic", "plausible limit"),
    ("short tensor", _set(["dielectric", "electronic"], [[10, 0, 0], [0, 10, 0]]), "dielectric.electronic",
     "too short"),
    ("normal in layer frame", _set(["dielectric", "normal"], [0, 0, 1]), "dielectric.normal", "only meaningful"),
    ("no conduction", lambda r: r.update(valleys=[v for v in r["valleys"] if v["band"] == "valence"]),
     "valleys", "no conduction valley"),
    ("no valence", lambda r: r.update(valleys=[v for v in r["valleys"] if v["band"] == "conduction"]),
     "valleys", "no valence valley"),
    ("duplicate valley", lambda r: r["valleys"].append(dict(r["valleys"][0])), "valleys[4].label",
     "already given"),
    ("layer key zero", _set(["valleys", 0, "edge_ev", "0"], -5.0), "valleys[0].edge_ev", "layer-count key '0'"),
    ("layer key word", _set(["valleys", 0, "edge_ev", "two"], -5.0), "valleys[0].edge_ev", "layer-count key 'two'"),
    ("missing bulk edge", _set(["valleys", 1, "edge_ev", "bulk"], _DELETE), "valleys[1].edge_ev",
     "'bulk' is a required property"),
    ("absurd edge", _set(["valleys", 1, "edge_ev", "1"], -1e5), "valleys[1].edge_ev.1", "beyond"),
    ("no gap", _set(["valleys", 2, "edge_ev", "1"], -7.0), "valleys[*].edge_ev.1", "no gap"),
    ("spacing missing", _set(["layer_spacing_angstrom"], _DELETE), "layer_spacing_angstrom",
     "required when no structure_file"),
    ("spacing absurd", _set(["layer_spacing_angstrom"], 500.0), "layer_spacing_angstrom", "plausible range"),
    ("missing cif", _set(["structure_file"], "absent.cif"), "structure_file", "not found"),
    ("cif path traversal", _set(["structure_file"], "../x.cif"), "structure_file", "does not match"),
    ("both screening forms", _set(["monolayer_screening", "polarizability_2d_angstrom"], 6.0),
     "monolayer_screening", "not both"),
    ("negative r0", _set(["monolayer_screening", "screening_length_angstrom"], -4.0),
     "monolayer_screening.screening_length_angstrom", "plausible range"),
    ("uncertainty above one", _set(["valleys", 0, "mass", "relative_uncertainty"], 3.0),
     "valleys[0].mass.relative_uncertainty", "plausible range"),
    ("too few band samples", lambda r: r["valleys"][2].update(
        band_samples={"k_per_angstrom": [[0, 0], [0.1, 0]], "energy_ev": [0, 0.1]}) or r["valleys"][2].pop("mass"),
     "valleys[2].band_samples.k_per_angstrom", "too few"),
    ("sample count mismatch", lambda r: r["valleys"][2].update(
        band_samples={"k_per_angstrom": [[0, 0]] * 7, "energy_ev": [0.0] * 6}) or r["valleys"][2].pop("mass"),
     "valleys[2].band_samples", "7 k points but 6 energies"),
    ("spin split without spin", _set(["valleys", 2, "spin_split_ev"], 0.03), "valleys[2]", "together"),
    ("spin without split", _set(["valleys", 2, "edge_spin"], "up"), "valleys[2]", "together"),
    ("negative spin split", lambda r: r["valleys"][2].update(spin_split_ev=-0.03, edge_spin="up"),
     "valleys[2].spin_split_ev", "minimum"),
    ("unknown spin", lambda r: r["valleys"][2].update(spin_split_ev=0.03, edge_spin="sideways"),
     "valleys[2].edge_spin", "is not one of"),
    ("zero degeneracy", _set(["valleys", 0, "degeneracy"], 0), "valleys[0].degeneracy", "minimum"),
    ("degeneracy disagrees", lambda r: [v.update(degeneracy=2 + i) for i, v in enumerate(r["valleys"])],
     "valleys[2].degeneracy", "elsewhere"),
    ("varshni without beta", _set(["gap_temperature"], {"form": "varshni", "alpha_ev_per_k": 4e-4}),
     "gap_temperature", "'varshni' needs"),
    ("edge origin below vacuum", _set(["band_edge_origin"], {"eps_top": 0.5, "eps_bottom": 1.0}),
     "band_edge_origin.eps_top", "minimum"),
]


@pytest.mark.parametrize("case, mutate, field, words", CASES, ids=[c[0] for c in CASES])
def test_each_rule_names_field_and_reason(checker, record, case, mutate, field, words):
    mutate(record)
    problems = checker.check(record, stem="fixture-a", structure_problem=lambda name: "file not found")
    assert problems, f"{case}: no problem reported"
    matching = [p for p in problems if p.field == field]
    assert matching, f"{case}: fields reported {[p.field for p in problems]}, expected {field!r}"
    assert any(words in p.reason for p in matching), [p.reason for p in matching]


def test_valid_record_passes(checker, record):
    assert checker.check(record, stem="fixture-a", structure_problem=lambda name: "file not found") == []


def test_every_schema_property_is_described():
    """Every property in the record schema documents itself (the README reference is built on it)."""
    schema = io.load_schema("entry.schema.json")

    def walk(node, path):
        for name, sub in node.get("properties", {}).items():
            assert "description" in sub or "$ref" in sub, f"{path}.{name} has no description"
            walk(sub, f"{path}.{name}")
        for name, sub in node.get("$defs", {}).items():
            walk(sub, f"$defs.{name}")

    walk(schema, "record")


@pytest.mark.parametrize("content, words", [
    (b"", "empty"),
    (b"   \n", "empty"),
    (b"\xff\xfe{\x00}\x00", "UTF-16 text"),
    (b"{\"a\": \"\xff\"}", "not UTF-8"),
    (b"{\"a\": \"\x00\"}", "NUL byte"),
    (b'{"id": NaN}', "non-finite number 'NaN'"),
    (b'{"id": Infinity}', "non-finite number 'Infinity'"),
    (b'{"id": ', "invalid JSON at line 1"),
    (b"[" * 100000 + b"]" * 100000, "invalid JSON"),
])
def test_read_record_reasons(tmp_path, content, words):
    path = tmp_path / "x.json"
    path.write_bytes(content)
    raw = io.read_record(path)
    assert raw.data is None and words in raw.error


def test_read_record_size_limit(tmp_path):
    path = tmp_path / "big.json"
    path.write_text(json.dumps({"pad": "x" * (io.MAX_RECORD_BYTES + 10)}))
    raw = io.read_record(path)
    assert "larger than" in raw.error


def test_read_record_accepts_bom(tmp_path, record):
    path = tmp_path / "fixture-a.json"
    path.write_bytes(b"\xef\xbb\xbf" + json.dumps(record).encode())
    assert io.read_record(path).data == record


@pytest.mark.parametrize("case, mutate, field, words", CASES, ids=[c[0] for c in CASES])
def test_compiled_gate_agrees_with_jsonschema(checker, record, case, mutate, field, words):
    """The compiled fast path and the jsonschema reference give the same verdict on every case."""
    mutate(record)
    reference = not list(checker._validator.iter_errors(record))
    assert checker.is_schema_valid(record) == reference


@pytest.mark.parametrize("value", [True, None, "1", [1], {"a": 1}, 1e308])
def test_gate_agrees_on_types(checker, record, value):
    record["scissor_ev"] = value
    reference = not list(checker._validator.iter_errors(record))
    assert checker.is_schema_valid(record) == reference


# ---------------------------------------------------------------------------------------------
# Every layer count is checked in both bands (given, or filled by the layer model)
# ---------------------------------------------------------------------------------------------

def _gap_check(*records, max_layers=4):
    """(kept entry ids, {rejected id: problems}) of normalised records through ingest.without_gapless."""
    from lamellume import ingest

    entries, valleys = [], []
    for rec in records:
        norm = ingest.normalize(rec, source_file=f"{rec['id']}.json", input_hash="h", max_layers=max_layers,
                                geometry=None, structure_hash=None, non_layered="warn", reconcile_rel_tol=0.05)
        entries.append(norm.entry)
        valleys.extend(norm.valleys)
    kept, kept_valleys, rejected = ingest.without_gapless(entries, valleys, max_layers=max_layers,
                                                          fit_exponent=False)
    assert {v["entry_id"] for v in kept_valleys} == {e["entry_id"] for e in kept}
    return [e["entry_id"] for e in kept], {e["entry_id"]: problems for e, problems in rejected}


def _bilayer_edge(e1, e_bulk):
    """Bilayer edge of the open two-site chain: lowest eigenvalue of [[eps, -t], [-t, eps]]
    with E_1 = eps and E_bulk = eps - 2 t (independent check with numpy.linalg.eigvalsh;
    source: Ashcroft and Mermin, ch. 10, tight-binding chain)."""
    import numpy as np

    t = (e1 - e_bulk) / 2
    return float(np.linalg.eigvalsh(np.array([[e1, -t], [-t, e1]]))[0])


@pytest.mark.parametrize("margin_ev, rejected", [(+0.005, False), (-0.005, True)])
def test_edge_given_in_one_band_is_checked_against_the_modelled_other(record, margin_ev, rejected):
    # conduction minimum at N=2 from the fixture's valleys K (-4.1, -4.15) and Q (-3.8, -4.2),
    # plus its scissor 0.5 eV
    cbm2 = min(_bilayer_edge(-4.1, -4.15), _bilayer_edge(-3.8, -4.2)) + record["scissor_ev"]
    other = copy.deepcopy(record)
    other["id"] = "fixture-b"
    record["valleys"][0]["edge_ev"]["2"] = cbm2 - margin_ev
    kept, rejected_ids = _gap_check(other, record)
    if not rejected:
        assert kept == ["fixture-b", "fixture-a"] and not rejected_ids
        return
    assert kept == ["fixture-b"]
    (problem,) = rejected_ids["fixture-a"]
    assert problem.field == "valleys[0].edge_ev.2"
    assert "no gap at 2 layers" in problem.reason and "from the layer model" in problem.reason


def test_conduction_edge_below_the_valence_band_in_one_band_only(record):
    record["valleys"][3]["edge_ev"]["3"] = -7.0  # conduction Q at N=3 far below every valence edge
    kept, rejected = _gap_check(record)
    assert kept == [] and [p.field for p in rejected["fixture-a"]] == ["valleys[3].edge_ev.3"]


def test_scissor_that_closes_the_gap_is_rejected_at_every_layer_count(record):
    record["scissor_ev"] = -2.0  # bulk: CBM -4.2 - 2.0 = -6.2 eV below VBM -5.6 eV
    _, rejected = _gap_check(record, max_layers=3)
    problems = rejected["fixture-a"]
    assert [p.field.rsplit(".", 1)[1] for p in problems] == ["1", "2", "3", "bulk"]
    assert all("scissor" in p.reason for p in problems)


def test_layer_counts_beyond_max_layers_are_not_checked(record):
    from lamellume import ingest

    record["valleys"][0]["edge_ev"]["9"] = 0.0  # ignored (with a warning) when max_layers = 4
    assert _gap_check(record) == (["fixture-a"], {})
    norm = ingest.normalize(record, source_file="a.json", input_hash="h", max_layers=4, geometry=None,
                            structure_hash=None, non_layered="warn", reconcile_rel_tol=0.05)
    assert "exceed max_layers" in norm.entry["warnings"]


def _tensor_family(rng, kind: str, n: int = 400) -> np.ndarray:
    """Symmetric tensors R diag(eig) R^T (random rotations), then perturbed per ``kind``."""
    q, _ = np.linalg.qr(rng.normal(size=(n, 3, 3)))
    if kind == "eigenvalue near 1":
        eig = np.stack([1.0 + rng.normal(scale=1e-3, size=n), rng.uniform(2, 20, n), rng.uniform(2, 20, n)], -1)
    elif kind == "eigenvalue near the limit":
        eig = np.stack([rng.uniform(2, 20, n), rng.uniform(2, 20, n), 200.0 + rng.normal(scale=0.05, size=n)], -1)
    elif kind == "indefinite":
        eig = np.stack([rng.uniform(-3, 0.5, n), rng.uniform(2, 20, n), rng.uniform(2, 20, n)], -1)
    else:
        eig = rng.uniform(1.0, 40.0, size=(n, 3))
    t = q @ (eig[..., None] * np.swapaxes(q, -1, -2))
    t = 0.5 * (t + np.swapaxes(t, -1, -2))
    if kind == "asymmetric near the tolerance":
        scale = np.max(np.abs(t), axis=(-1, -2))
        t[:, 0, 1] += rng.uniform(0.2, 2.0, n) * 1e-4 * scale
    if kind == "non-finite":
        t[np.arange(n), rng.integers(0, 3, n), rng.integers(0, 3, n)] = rng.choice([np.nan, np.inf, -np.inf], n)
    return t


@pytest.mark.parametrize("kind", ["plain", "eigenvalue near 1", "eigenvalue near the limit", "indefinite",
                                  "asymmetric near the tolerance", "non-finite"])
def test_tensor_prefilter_clears_only_tensors_without_problems(kind):
    # common practice: the shard's shared tensor check is a prefilter, never a definition; a
    # record it clears has no tensor problem (tensor_problems, one tensor at a time, is the
    # definition), and plainly valid tensors are cleared
    from lamellume import contract

    tensors = _tensor_family(np.random.default_rng(11), kind)
    records = [{"dielectric": {"frame": "layer", "electronic": t.tolist()}} for t in tensors]
    clear = contract.clear_tensors(records)
    problems = [contract.tensor_problems(t.tolist(), max_eps=contract.MAX_ELECTRONIC_EPS) for t in tensors]
    assert not any(c and p for c, p in zip(clear, problems))
    if kind == "plain":
        assert clear.all()
    else:
        assert (~clear).any()


def test_tensor_prefilter_judges_both_tensors_of_a_record():
    # common practice: a record is cleared only when its electronic and its static tensor both pass
    from lamellume import contract

    good = np.diag([5.0, 5.0, 3.0]).tolist()
    bad = np.diag([5.0, 0.5, 3.0]).tolist()
    records = [{"dielectric": {"frame": "layer", "electronic": good, "static": good}},
               {"dielectric": {"frame": "layer", "electronic": good, "static": bad}},
               {"dielectric": {"frame": "layer", "electronic": bad}},
               {"dielectric": {"frame": "layer", "electronic": good}}]
    assert contract.clear_tensors(records).tolist() == [True, False, False, True]
    assert contract.clear_tensors([]).tolist() == []


@pytest.mark.parametrize("values, lo, hi", [
    ([0.5, -2.0, 3], -10.0, 10.0),
    ([0.5, float("nan"), 3.0], -10.0, 10.0),
    ([0.5, float("inf")], -math.inf, math.inf),
    ([1e308, 1e308], -math.inf, math.inf),  # the sum overflows, every value is finite
    ([10**308, 10**308], -math.inf, math.inf),  # an integer sum beyond the float range
    ([0.5, 10.5], -10.0, 10.0),
    ([-10.0, 10.0], -10.0, 10.0),
    ([], -1.0, 1.0),
    ([True, 0.5], -1.0, 1.0),
])
def test_all_within_is_the_per_value_rule(values, lo, hi):
    # common practice: the fast form answers exactly as the per-value loop it replaces
    from lamellume import contract

    expected = all(contract._finite(x) and lo <= x <= hi for x in values)
    assert contract._all_within(values, lo, hi) is expected
