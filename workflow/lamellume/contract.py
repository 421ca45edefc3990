"""The input contract: schema validation plus physical checks of one record.

A record is checked in two passes. The JSON Schema (workflow/schemas/
entry.schema.json, checked with the jsonschema library) decides structure and
types; the physical checks below decide whether the numbers make sense. Every
problem names the field by a path such as ``valleys[2].mass.isotropic_me`` and
gives a reason; the caller adds the file name.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any, Callable, Iterable

import numpy as np

from lamellume import dielectric, masses

#: Electronic dielectric constants above this are treated as input errors.
MAX_ELECTRONIC_EPS = 200.0
#: Static dielectric constants above this are treated as input errors.
MAX_STATIC_EPS = 1e5
#: Band-edge energies beyond this magnitude (eV) are treated as input errors.
MAX_ABS_EDGE_EV = 100.0
#: Plausible geometry windows (Angstrom).
SPACING_RANGE_ANGSTROM = (1.0, 60.0)
LATTICE_RANGE_ANGSTROM = (1.0, 100.0)
SCREENING_LENGTH_RANGE_ANGSTROM = (1e-3, 2000.0)
MAX_ABS_SCISSOR_EV = 10.0
#: Minimum number of k points for a mass fit from band samples.
MIN_BAND_SAMPLES = 6


@dataclass(frozen=True)
class Problem:
    """One reason a record cannot be screened."""

    field: str
    reason: str


def format_path(parts: Iterable[Any]) -> str:
    """Render a JSON path as ``a.b[2].c``; the empty path is ``(record)``."""
    out = ""
    for part in parts:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += f".{part}" if out else str(part)
    return out or "(record)"


def _short(text: str, limit: int = 240) -> str:
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _schema_message(err) -> str:
    """A schema error's message with a long leading instance repr shortened, so the
    reason itself ("is not of type 'object'", "is too short") is never cut off."""
    message = err.message
    try:
        shown = repr(err.instance)
    except RecursionError:
        shown = ""
    if len(shown) > 60 and message.startswith(shown):
        message = _short(shown, 60) + message[len(shown):]
    return _short(message)


def _oneof_hint(path: list) -> str:
    """Readable reason for a failed ``oneOf`` at a record path."""
    if path and path[-1] == "gap_temperature":
        return "'varshni' needs 'alpha_ev_per_k' and 'beta_k'; 'bose-einstein' needs 'coupling' and 'phonon_energy_ev'"
    if path and path[-1] == "mass":
        return "give exactly one in-plane mass form: 'isotropic_me', 'principal_me' or 'tensor_me'"
    if len(path) == 2 and path[0] == "valleys":
        return "give exactly one of 'mass' or 'band_samples'"
    return "matches none or several of the allowed forms"


def inline_local_refs(schema: dict) -> dict:
    """The schema with every local ``#/$defs/<name>`` reference replaced by its definition.

    The record schema is not recursive, so this terminates; validation then skips
    jsonschema's reference resolution, which is about 40 % of its cost per record.
    """
    defs = schema.get("$defs", {})

    def walk(node):
        if isinstance(node, dict):
            if "$ref" in node:
                ref = node["$ref"]
                if not ref.startswith("#/$defs/"):
                    raise ValueError(f"only local $defs references are supported, got {ref!r}")
                merged = {**walk(defs[ref.split("/")[-1]]), **{k: walk(v) for k, v in node.items() if k != "$ref"}}
                return merged
            return {k: walk(v) for k, v in node.items() if k not in ("$defs", "$id")}
        if isinstance(node, list):
            return [walk(x) for x in node]
        return node

    return walk(schema)


def _lean_gate(code: str) -> Callable[[Any], Any]:
    """The compiled validator of fastjsonschema's generated ``code``, raising without a message.

    The gate only answers valid or not (jsonschema writes every message), yet
    the generated code formats a message with the failing value and a copy of
    the schema node at every ``raise``, also inside the ``anyOf``/``oneOf``
    branches a valid record tries and leaves: 60 % of the gate's time on valid
    records. Each ``raise`` line is replaced by a raise of one exception of the
    same class made once (its traceback cleared, so it keeps no old frames);
    the control flow, and so the verdict, is unchanged
    (tests/unit/test_contract.py checks the gate against jsonschema).
    """
    lean, count = re.subn(r"(?m)^(\s*)raise JsonSchemaValueException\(.*\)$", r"\1raise _REFUSED.with_traceback(None)", code)
    if not count:
        raise RuntimeError("fastjsonschema's generated code changed form; review RecordChecker's gate")
    from fastjsonschema import JsonSchemaValueException

    namespace: dict = {"_REFUSED": JsonSchemaValueException("")}
    exec(compile(lean, "<record schema gate>", "exec"), namespace)  # noqa: S102 - code generated from our schema
    return namespace["validate"]


class RecordChecker:
    """Validate parsed records against the schema and the physical rules."""

    def __init__(self, schema: dict):
        import fastjsonschema

        self._gate_error = fastjsonschema.JsonSchemaException
        self._schema = schema
        self._inlined = inline_local_refs(schema)
        self._reference = None
        # A compiled gate for the common case of a valid record (about 5x faster).
        # The schema uses only keywords whose meaning is the same in draft 7 and
        # 2020-12; tests/unit/test_contract.py checks the two agree. jsonschema
        # stays the reference and writes every message; it is built on the first
        # record the gate turns away, so a shard of valid records never loads it.
        self._gate = _lean_gate(fastjsonschema.compile_to_code(
            {**self._inlined, "$schema": "http://json-schema.org/draft-07/schema#"}))

    @property
    def _validator(self):
        """The reference jsonschema validator (draft 2020-12), built on first use."""
        if self._reference is None:
            from jsonschema import Draft202012Validator

            Draft202012Validator.check_schema(self._schema)
            self._reference = Draft202012Validator(self._inlined)
        return self._reference

    def is_schema_valid(self, record: Any) -> bool:
        """Fast structural check (compiled); True when the record matches the schema."""
        try:
            self._gate(record)
        except self._gate_error:
            return False
        return True

    def schema_problems(self, record: Any) -> list[Problem]:
        """Structural problems found by the JSON Schema, in document order."""
        if self.is_schema_valid(record):
            return []
        problems = []
        for err in sorted(self._validator.iter_errors(record), key=lambda e: [str(p) for p in e.absolute_path]):
            field = format_path(err.absolute_path)
            if err.validator == "oneOf":
                reason = _oneof_hint(list(err.absolute_path))
            elif err.validator == "additionalProperties":
                reason = _short(err.message)
            elif "propertyNames" in err.relative_schema_path:
                reason = f"layer-count key {err.instance!r} is not a positive integer below 100 or 'bulk'"
            else:
                reason = _schema_message(err)
            problems.append(Problem(field, reason))
        return problems

    def check(self, record: Any, *, stem: str, structure_problem: Callable[[str], str | None],
              tensors_clear: bool = False) -> list[Problem]:
        """All problems of one record: schema first, physics only on a well-formed record.

        ``structure_problem(name)`` tells why the referenced structure file cannot
        be read (``"file not found"``, ``"is a directory, not a file"``, ...) or
        returns None when it can. ``tensors_clear``: :func:`clear_tensors` found
        the record's dielectric tensors free of problems (their checks are skipped).
        """
        problems = self.schema_problems(record)
        if problems:
            return problems
        return physical_problems(record, stem=stem, structure_problem=structure_problem,
                                 tensors_clear=tensors_clear)


def _finite(value: float) -> bool:
    return isinstance(value, (int, float)) and math.isfinite(value)


def _all_within(values, lo: float, hi: float) -> bool:
    """Every value a finite number in [lo, hi]: ``all(_finite(x) and lo <= x <= hi for x in values)``.

    Decided without a call per value when it holds (a finite sum means no NaN
    or infinity among numbers); otherwise value by value.
    """
    try:
        if math.isfinite(sum(values)) and lo <= min(values) and max(values) <= hi:
            return True
    except (TypeError, ValueError, OverflowError):  # not numbers, no values, an integer sum beyond floats
        pass
    return all(_finite(x) and lo <= x <= hi for x in values)


def tensor_problems(tensor: list[list[float]], *, max_eps: float) -> list[str]:
    """Reasons a 3x3 dielectric tensor is unusable: those of
    :func:`lamellume.dielectric.validate_tensor` plus an implausibly large eigenvalue."""
    reason = dielectric.validate_tensor(np.asarray(tensor, dtype=float)[None])[0]
    if reason:
        return [reason]
    largest = float(np.linalg.eigvalsh(np.asarray(tensor, dtype=float))[-1])
    if largest > max_eps:
        return [f"has an eigenvalue {largest:.4g} above the plausible limit {max_eps:g}"]
    return []


#: Dielectric tensors checked (the order of :func:`physical_problems`) and their plausible limit.
_TENSOR_LIMITS = (("electronic", MAX_ELECTRONIC_EPS), ("static", MAX_STATIC_EPS))


def clear_tensors(records: list[dict]) -> np.ndarray:
    """Which schema-valid records certainly pass every :func:`tensor_problems` check (all at once).

    A prefilter for a shard of records, never a definition: True only with a
    margin, so a record it clears has no tensor problem, and every other record
    is checked one by one (which writes the messages). A tensor is cleared when
    its components are finite, max |T - T^T| <= SYMMETRY_RTOL/2 x max |T|, and
    the eigenvalues of its symmetric part lie in [1 + d, max_eps - d] with
    d = 2 x SYMMETRY_RTOL x max |T|. :func:`tensor_problems` takes the
    eigenvalues of the symmetric part (positivity, >= 1) and of the lower
    triangle (the limit); the two matrices differ by (T - T^T)/2 off the
    diagonal, whose spectral norm is at most max |T - T^T| (two such entries a
    row), so by Weyl's inequality their eigenvalues differ by less than d/4,
    and rounding by far less.

    Returns
    -------
    numpy.ndarray of bool, one per record.
    """
    tensors, owners, limits = [], [], []
    for i, record in enumerate(records):
        diel = record["dielectric"]
        for key, max_eps in _TENSOR_LIMITS:
            if key in diel:
                tensors.append(diel[key])
                owners.append(i)
                limits.append(max_eps)
    clear = np.ones(len(records), dtype=bool)
    if not tensors:
        return clear
    t = np.array(tensors, dtype=float)
    finite = np.all(np.isfinite(t), axis=(-1, -2))
    t = np.where(finite[:, None, None], t, np.eye(3))
    scale = np.max(np.abs(t), axis=(-1, -2))
    asym = np.max(np.abs(t - np.swapaxes(t, -1, -2)), axis=(-1, -2))
    eig = np.linalg.eigvalsh(0.5 * (t + np.swapaxes(t, -1, -2)))
    margin = 2.0 * dielectric.SYMMETRY_RTOL * scale
    ok = (finite & (asym <= 0.5 * dielectric.SYMMETRY_RTOL * scale) & (eig[:, 0] >= 1.0 + margin)
          & (eig[:, -1] <= np.array(limits) - margin))
    np.logical_and.at(clear, np.array(owners), ok)
    return clear


def mass_problems(value: float) -> str | None:
    """Reason a mass value (m_e) is unusable, or None.

    The same rules as :func:`lamellume.masses.validate_masses` (which works on
    arrays), written for one scalar because records are checked one at a time.
    """
    if isinstance(value, (int, float)) and masses.MASS_MIN_ME <= value <= masses.MASS_MAX_ME:
        return None  # finite and positive
    if not _finite(value):
        return "is not finite"
    if value <= 0:
        return f"mass <= 0 ({value:g} m_e)"
    if not masses.MASS_MIN_ME <= value <= masses.MASS_MAX_ME:
        return f"{value:g} m_e is outside the plausible range [{masses.MASS_MIN_ME:g}, {masses.MASS_MAX_ME:g}] m_e"
    return None


def _range_problem(value: float, window: tuple[float, float], unit: str) -> str | None:
    lo, hi = window
    if isinstance(value, (int, float)) and lo <= value <= hi:
        return None  # finite: the window is
    if not _finite(value):
        return "is not finite"
    if not lo <= value <= hi:
        return f"{value:g} {unit} is outside the plausible range [{lo:g}, {hi:g}] {unit}"
    return None


def _mass_block_problems(mass: dict, path: list) -> list[Problem]:
    out = []
    if "isotropic_me" in mass:
        r = mass_problems(mass["isotropic_me"])
        if r:
            out.append(Problem(format_path(path + ["isotropic_me"]), r))
    if "principal_me" in mass:
        for i, m in enumerate(mass["principal_me"]):
            r = mass_problems(m)
            if r:
                out.append(Problem(format_path(path + ["principal_me", i]), r))
        if "angle_deg" in mass and not _finite(mass["angle_deg"]):
            out.append(Problem(format_path(path + ["angle_deg"]), "is not finite"))
    elif "angle_deg" in mass:
        out.append(Problem(format_path(path + ["angle_deg"]), "only meaningful with 'principal_me'"))
    if "tensor_me" in mass:
        t = np.asarray(mass["tensor_me"], dtype=float)
        p = format_path(path + ["tensor_me"])
        if not np.all(np.isfinite(t)):
            out.append(Problem(p, "contains a non-finite component"))
        elif abs(t[0, 1] - t[1, 0]) > 1e-6 * max(np.max(np.abs(t)), 1e-30):
            out.append(Problem(p, "is not symmetric"))
        else:
            eig = np.linalg.eigvalsh(t)
            for e in eig:
                r = mass_problems(float(e))
                if r:
                    out.append(Problem(p, f"principal {r if r.startswith('mass') else 'mass ' + r}"))
                    break
    if "perpendicular_me" in mass:
        r = mass_problems(mass["perpendicular_me"])
        if r:
            out.append(Problem(format_path(path + ["perpendicular_me"]), r))
    if "relative_uncertainty" in mass:
        r = _range_problem(mass["relative_uncertainty"], (0.0, 1.0), "(relative)")
        if r:
            out.append(Problem(format_path(path + ["relative_uncertainty"]), r))
    return out


def _samples_problems(samples: dict, path: list) -> list[Problem]:
    k = samples["k_per_angstrom"]
    e = samples["energy_ev"]
    out = []
    if len(k) != len(e):
        out.append(Problem(format_path(path), f"{len(k)} k points but {len(e)} energies"))
    if len({len(row) for row in k}) > 1:
        out.append(Problem(format_path(path + ["k_per_angstrom"]), "mixes 2- and 3-component k points"))
    if len(k) < MIN_BAND_SAMPLES:
        out.append(Problem(format_path(path + ["k_per_angstrom"]),
                           f"{len(k)} points are too few for a mass fit (need at least {MIN_BAND_SAMPLES})"))
    if not _all_within([x for row in k for x in row], -math.inf, math.inf):
        out.append(Problem(format_path(path + ["k_per_angstrom"]), "contains a non-finite value"))
    if not _all_within(e, -MAX_ABS_EDGE_EV, MAX_ABS_EDGE_EV):
        out.append(Problem(format_path(path + ["energy_ev"]), f"contains a non-finite value or one beyond {MAX_ABS_EDGE_EV:g} eV"))
    return out


def physical_problems(record: dict, *, stem: str, structure_problem: Callable[[str], str | None],
                      tensors_clear: bool = False) -> list[Problem]:
    """Physical and cross-field checks of a schema-valid record.

    ``tensors_clear``: the dielectric tensors are known to pass (:func:`clear_tensors`).
    """
    out: list[Problem] = []
    if record["id"] != stem:
        out.append(Problem("id", f"identifier {record['id']!r} differs from the file name '{stem}.json' (the id must equal the "
                           f"file name without .json)"))

    diel = record["dielectric"]
    for key, max_eps in () if tensors_clear else _TENSOR_LIMITS:
        if key in diel:
            for reason in tensor_problems(diel[key], max_eps=max_eps):
                out.append(Problem(f"dielectric.{key}", f"tensor: {reason}"))
    if "normal" in diel:
        n = np.asarray(diel["normal"], dtype=float)
        if not np.all(np.isfinite(n)) or np.linalg.norm(n) < 1e-8:
            out.append(Problem("dielectric.normal", "must be a finite, non-zero vector"))
        if diel["frame"] == "layer":
            out.append(Problem("dielectric.normal", "only meaningful with frame 'crystal' (in the layer frame the normal is z)"))
    if "relative_uncertainty" in diel:
        r = _range_problem(diel["relative_uncertainty"], (0.0, 1.0), "(relative)")
        if r:
            out.append(Problem("dielectric.relative_uncertainty", r))

    has_structure = "structure_file" in record
    if has_structure:
        reason = structure_problem(record["structure_file"])
        if reason and reason.startswith("file not found"):
            out.append(Problem("structure_file", f"referenced structure {record['structure_file']!r} not found "
                                                  f"in structures/{reason[len('file not found'):]}"))
        elif reason:
            sep = " " if reason.startswith("is ") else ": "
            out.append(Problem("structure_file", f"referenced structure {record['structure_file']!r}{sep}{reason}"))
    for key, window in (("layer_spacing_angstrom", SPACING_RANGE_ANGSTROM),
                        ("inplane_lattice_angstrom", LATTICE_RANGE_ANGSTROM)):
        if key in record:
            r = _range_problem(record[key], window, "Angstrom")
            if r:
                out.append(Problem(key, r))
        elif not has_structure:
            out.append(Problem(key, "required when no structure_file is given"))
    for key in ("scissor_ev", "scissor_uncertainty_ev"):
        if key in record:
            r = _range_problem(record[key], (-MAX_ABS_SCISSOR_EV if key == "scissor_ev" else 0.0, MAX_ABS_SCISSOR_EV), "eV")
            if r:
                out.append(Problem(key, r))

    screening = record.get("monolayer_screening", {})
    if screening:
        if set(screening) == {"relative_uncertainty"}:
            out.append(Problem("monolayer_screening", "give 'polarizability_2d_angstrom' or 'screening_length_angstrom'"))
        for key in ("polarizability_2d_angstrom", "screening_length_angstrom"):
            if key in screening:
                window = SCREENING_LENGTH_RANGE_ANGSTROM if key.startswith("screening") else \
                    tuple(x / (2 * math.pi) for x in SCREENING_LENGTH_RANGE_ANGSTROM)
                r = _range_problem(screening[key], window, "Angstrom")
                if r:
                    out.append(Problem(f"monolayer_screening.{key}", r))
        if {"polarizability_2d_angstrom", "screening_length_angstrom"} <= set(screening):
            out.append(Problem("monolayer_screening", "give the polarizability or the screening length, not both"))
        if "relative_uncertainty" in screening:
            r = _range_problem(screening["relative_uncertainty"], (0.0, 1.0), "(relative)")
            if r:
                out.append(Problem("monolayer_screening.relative_uncertainty", r))

    bands = {"valence": 0, "conduction": 0}
    seen: dict[tuple[str, str], int] = {}
    degeneracies: dict[str, int] = {}
    for i, valley in enumerate(record["valleys"]):
        base = ["valleys", i]
        bands[valley["band"]] += 1
        key = (valley["label"], valley["band"])
        if key in seen:
            out.append(Problem(format_path(base + ["label"]),
                               f"{valley['band']} valley {valley['label']!r} already given at valleys[{seen[key]}]"))
        seen.setdefault(key, i)
        edges = valley["edge_ev"]
        for layer_key, energy in () if _all_within(edges.values(), -MAX_ABS_EDGE_EV, MAX_ABS_EDGE_EV) else edges.items():
            if not _finite(energy) or abs(energy) > MAX_ABS_EDGE_EV:
                out.append(Problem(format_path(base + ["edge_ev", layer_key]),
                                   f"edge energy {energy!r} is not finite or beyond {MAX_ABS_EDGE_EV:g} eV"))
        if "edge_uncertainty_ev" in valley:
            r = _range_problem(valley["edge_uncertainty_ev"], (0.0, 5.0), "eV")
            if r:
                out.append(Problem(format_path(base + ["edge_uncertainty_ev"]), r))
        if "mass" in valley:
            out.extend(_mass_block_problems(valley["mass"], base + ["mass"]))
        if "band_samples" in valley:
            out.extend(_samples_problems(valley["band_samples"], base + ["band_samples"]))
        if ("spin_split_ev" in valley) != ("edge_spin" in valley):
            out.append(Problem(format_path(base), "give 'spin_split_ev' and 'edge_spin' together"))
        degeneracy = degeneracies.setdefault(valley["label"], valley.get("degeneracy", 1))
        if valley.get("degeneracy", 1) != degeneracy:
            out.append(Problem(format_path(base + ["degeneracy"]),
                               f"label {valley['label']!r} is given degeneracy {degeneracy} elsewhere"))
    for band, count in bands.items():
        if count == 0:
            out.append(Problem("valleys", f"no {band} valley given; need at least one valence and one conduction valley"))

    if not out and bands["valence"] and bands["conduction"]:
        out.extend(_gap_problems(record["valleys"]))
    return out


def _gap_problems(valleys: list[dict]) -> list[Problem]:
    """A conduction edge at or below a valence edge at a given layer count means no gap."""
    out = []
    layer_keys = sorted({k for v in valleys for k in v["edge_ev"]}, key=lambda k: (k == "bulk", k.zfill(3)))
    for key in layer_keys:
        vb = [v["edge_ev"][key] for v in valleys if v["band"] == "valence" and key in v["edge_ev"]]
        cb = [v["edge_ev"][key] for v in valleys if v["band"] == "conduction" and key in v["edge_ev"]]
        if vb and cb and min(cb) <= max(vb):
            out.append(Problem(f"valleys[*].edge_ev.{key}",
                               f"lowest conduction edge {min(cb):g} eV is not above highest valence edge {max(vb):g} eV "
                               "(no gap: a metal, or bands mislabelled)"))
    return out
