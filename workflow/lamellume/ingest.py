"""Normalise one validated record into flat rows for the screen.

Input: a record that passed :mod:`lamellume.contract`, plus the result of the
structure analysis of its CIF (if any). Output: one entry row and one row per
valley, in internal units and in the layer frame, ready to be stacked into
columnar tables. Masses given as band samples are fitted here
(:mod:`lamellume.bandfit`). Anything that makes the record unusable at this
stage raises :class:`Rejected` with the field and reason.
"""

from __future__ import annotations

import functools
import math
import operator
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from typing import TYPE_CHECKING

from lamellume import bandfit, dielectric, masses, tables
from lamellume.contract import Problem

if TYPE_CHECKING:  # pymatgen is imported only when a structure is analysed
    from lamellume.structure import LayerGeometry

#: Layer-frame tensor components stored in the entry table (symmetric tensor).
TENSOR_COMPONENTS = (("xx", 0, 0), ("yy", 1, 1), ("zz", 2, 2), ("xy", 0, 1), ("xz", 0, 2), ("yz", 1, 2))


class Rejected(Exception):
    """A record that cannot be screened; carries its problems."""

    def __init__(self, problems: list[Problem]):
        super().__init__("; ".join(f"{p.field}: {p.reason}" for p in problems))
        self.problems = problems


@dataclass
class NormalizedRecord:
    """Flat rows of one record (internal units, layer frame)."""

    entry: dict
    valleys: list[dict]
    warnings: list[str] = field(default_factory=list)


#: Valley-table code of the edge sub-band's spin (see :mod:`lamellume.excitons`).
_SPIN_CODE = {"up": 1, "down": -1, "": 0}


def edge_column(layers: int) -> str:
    """Column name of the band edge at a layer count (0 = bulk)."""
    return "edge_bulk_ev" if layers == 0 else f"edge_{layers}l_ev"


@functools.lru_cache(maxsize=8)
def _layer_edge_keys(max_layers: int) -> tuple[tuple[str, str], ...]:
    """(edge column, record key) of the layer counts 1..max_layers."""
    return tuple((edge_column(n), str(n)) for n in range(1, max_layers + 1))


def layer_normal(record: dict, geometry: LayerGeometry | None) -> np.ndarray:
    """The layer normal :func:`normalize` uses, in the frame of the record's dielectric tensors."""
    return _normal(record, geometry, [])[0]


def _normal(record: dict, geometry: LayerGeometry | None, warnings: list[str]) -> tuple[np.ndarray, str]:
    diel = record["dielectric"]
    if diel["frame"] == "layer":
        return np.array([0.0, 0.0, 1.0]), "layer frame"
    if "normal" in diel:
        n = np.asarray(diel["normal"], dtype=float)
        return n / np.linalg.norm(n), "record"
    if geometry is not None and geometry.layer_normal is not None:
        return np.asarray(geometry.layer_normal, dtype=float), "structure"
    warnings.append("dielectric.frame is 'crystal' without a normal or a layered structure; "
                    "the layer normal is assumed along Cartesian z (c axis of a standard setting)")
    return np.array([0.0, 0.0, 1.0]), "assumed z"


def _tensor_columns(prefix: str, tensor: np.ndarray | None) -> dict:
    names = _tensor_names(prefix)
    if tensor is None:
        return dict.fromkeys(names, math.nan)
    t = tensor.tolist()
    return {name: float(t[i][j]) for name, (_, i, j) in zip(names, TENSOR_COMPONENTS)}


@functools.lru_cache(maxsize=4)
def _tensor_names(prefix: str) -> tuple[str, ...]:
    return tuple(f"{prefix}_{name}" for name, _, _ in TENSOR_COMPONENTS)


def _inverse_mass(valley: dict, path: str, normal: np.ndarray, warnings: list[str],
                  prepared: object = None) -> tuple[np.ndarray, dict]:
    """In-plane inverse-mass tensor (1/m_e, carrier sign, layer frame) and fit diagnostics.

    Band samples are in the frame of ``dielectric.frame``; ``normal`` is the layer
    normal in that frame, so the fit rotates them into the layer frame.
    ``prepared`` is the valley's result of :func:`prepare_masses` (None: computed here).
    """
    if "mass" in valley:
        m = valley["mass"]
        if prepared is not None:
            inv = prepared
        elif "isotropic_me" in m:
            inv = masses.inverse_mass_tensor_2d_from_scalar(np.array([m["isotropic_me"]]))[0]
        elif "principal_me" in m:
            m1, m2 = m["principal_me"]
            inv = masses.inverse_mass_tensor_2d_from_principal(
                np.array([m1]), np.array([m2]), np.array([m.get("angle_deg", 0.0)]))[0]
        else:
            inv = masses.inverse_mass_tensor_2d_from_tensor(np.array([m["tensor_me"]], dtype=float))[0]
        return inv, {"mass_source": "given", "mass_fit_rms_ev": math.nan, "mass_nonparabolic": False,
                     "mass_perp_me": float(m.get("perpendicular_me", math.nan))}
    fit = prepared
    if fit is None:
        samples = valley["band_samples"]
        k = np.asarray(samples["k_per_angstrom"], dtype=float)
        e = np.asarray(samples["energy_ev"], dtype=float)
        try:
            fit = bandfit.fit_effective_mass(k, e, valley["band"], layer_normal=normal,
                                             fix_k0=bool(samples.get("extremum_at_origin", False)))
        except bandfit.MassFitError as exc:
            raise Rejected([Problem(f"{path}.band_samples", f"mass fit failed: {exc}")]) from exc
    warnings.extend(f"{path}.band_samples: {note}" for note in fit.warnings if note.startswith("out-of-plane"))
    if fit.nonparabolic:
        warnings.append(f"{path}: band samples show a notable non-parabolic (quartic) term; "
                        "the fitted mass describes the band bottom only")
    return np.asarray(fit.inverse_mass_tensor, dtype=float), {
        "mass_source": "fitted", "mass_fit_rms_ev": float(fit.rms_residual_ev),
        "mass_nonparabolic": bool(fit.nonparabolic), "mass_perp_me": float(fit.perpendicular_mass_me)}


def layer_rotations(records: list[dict], normals: list[np.ndarray]) -> list[np.ndarray | None]:
    """Per record, :func:`lamellume.dielectric.rotation_to_layer_frame` of its normal where its
    tensors are in the crystal frame (else None), for :func:`normalize`'s ``rotation``.

    One call for all records (each row's rotation is computed alone); all None
    when a normal cannot be used, so :func:`normalize` meets the problem itself.
    """
    crystal = [i for i, record in enumerate(records) if record["dielectric"]["frame"] == "crystal"]
    out: list[np.ndarray | None] = [None] * len(records)
    if crystal:
        try:
            rotations = dielectric.rotation_to_layer_frame(np.array([normals[i] for i in crystal], dtype=float))
        except ValueError:
            return out
        for i, rotation in zip(crystal, rotations):
            out[i] = rotation
    return out


def prepare_masses(records: list[dict], normals: list[np.ndarray]) -> list[dict[int, object]]:
    """The per-valley mass results of many records at once, for :func:`normalize`'s ``prepared``.

    Isotropic given masses go through one call of
    :func:`lamellume.masses.inverse_mass_tensor_2d_from_scalar` (an element-wise
    division); band samples of the same band, extremum setting and shape through
    one call of :func:`lamellume.bandfit.fit_effective_masses` (each valley's
    least squares is solved alone, so the stack gives each valley's own fit).
    A stack that raises is left out, as are the other mass forms:
    :func:`normalize` fits or converts those valleys one by one and reports
    their errors.

    Parameters
    ----------
    records : contract-valid records.
    normals : each record's layer normal in its dielectric frame (``_normal``).

    Returns
    -------
    per record, valley index -> inverse-mass tensor (1/m_e) or :class:`lamellume.bandfit.MassFit`.
    """
    out: list[dict[int, object]] = [{} for _ in records]
    scalar_at, scalar = [], []
    stacks: dict[tuple, list] = {}
    for r, (record, normal) in enumerate(zip(records, normals)):
        for i, valley in enumerate(record["valleys"]):
            if "isotropic_me" in valley.get("mass", ()):
                scalar_at.append((r, i))
                scalar.append(valley["mass"]["isotropic_me"])
            elif "band_samples" in valley:
                samples = valley["band_samples"]
                try:
                    k = np.asarray(samples["k_per_angstrom"], dtype=float)
                    e = np.asarray(samples["energy_ev"], dtype=float)
                except (TypeError, ValueError):
                    continue  # left to normalize, which reports it
                key = (valley["band"], bool(samples.get("extremum_at_origin", False)), k.shape, e.shape)
                stacks.setdefault(key, []).append((r, i, k, e, normal))
    if scalar:
        for (r, i), inv in zip(scalar_at, masses.inverse_mass_tensor_2d_from_scalar(np.array(scalar))):
            out[r][i] = inv
    for (band, fix_k0, _, _), group in stacks.items():
        try:
            fits = bandfit.fit_effective_masses(
                np.stack([k for _, _, k, _, _ in group]), np.stack([e for _, _, _, e, _ in group]), band,
                layer_normal=np.stack([n for *_, n in group]), fix_k0=fix_k0)
        except (bandfit.MassFitError, np.linalg.LinAlgError, ValueError):
            continue
        for (r, i, *_), fit in zip(group, fits):
            out[r][i] = fit
    return out


def normalize(record: dict, *, source_file: str, input_hash: str, max_layers: int,
              geometry: LayerGeometry | None, structure_hash: str | None,
              non_layered: str, reconcile_rel_tol: float,
              prepared: dict[int, object] | None = None, rotation: np.ndarray | None = None) -> NormalizedRecord:
    """Flatten a contract-valid record; raise :class:`Rejected` when it cannot be screened.

    The gap at layer counts the record does not give is checked afterwards, for
    many records at once (:func:`without_gapless`). ``prepared`` and ``rotation``:
    the record's entries of :func:`prepare_masses` and :func:`layer_rotations`
    (computed for many records at once, with the normal this record gets here).
    """
    warnings: list[str] = []
    ident = record["id"]

    if geometry is not None and not geometry.is_layered:
        reason = (f"structure {record['structure_file']!r} shows no 2D-bonded layers "
                  f"(dimensionality {geometry.dimensionality})")
        if non_layered == "reject":
            raise Rejected([Problem("structure_file", reason)])
        warnings.append(reason)
    if geometry is not None:
        warnings.extend(f"structure: {w}" for w in geometry.warnings)

    given_spacing = record.get("layer_spacing_angstrom")
    given_lattice = record.get("inplane_lattice_angstrom")
    from lamellume.structure import compare_geometry

    spacing, lattice, messages = compare_geometry(given_spacing, given_lattice, geometry,
                                                            rel_tol=reconcile_rel_tol)
    warnings.extend(m for m in messages if "not given" not in m)
    spacing_source = "record" if given_spacing is not None else "structure"
    lattice_source = "record" if given_lattice is not None else "structure"
    if geometry is not None and not geometry.is_layered:
        why = (f"not given, and the structure {record['structure_file']!r} shows no 2D-bonded layers "
               f"(dimensionality {geometry.dimensionality}) to derive it from")
    else:
        why = "not given and not derivable from the structure"
    missing = [Problem(name, why)
               for name, value in (("layer_spacing_angstrom", spacing), ("inplane_lattice_angstrom", lattice))
               if value is None]
    if missing:
        raise Rejected(missing)

    normal, normal_source = _normal(record, geometry, warnings)
    diel = record["dielectric"]
    eps_inf = np.asarray(diel["electronic"], dtype=float)
    eps_0 = np.asarray(diel["static"], dtype=float) if "static" in diel else None
    if diel["frame"] == "crystal":
        r = None if rotation is None else rotation[None]
        eps_inf = dielectric.to_layer_frame(eps_inf[None], normal[None], rotation=r)[0]
        eps_0 = None if eps_0 is None else dielectric.to_layer_frame(eps_0[None], normal[None], rotation=r)[0]

    screening = record.get("monolayer_screening", {})
    if "screening_length_angstrom" in screening:
        r0, r0_source = screening["screening_length_angstrom"], "record r0"
    elif "polarizability_2d_angstrom" in screening:
        r0, r0_source = 2.0 * math.pi * screening["polarizability_2d_angstrom"], "record alpha_2D"
    else:
        r0, r0_source = math.nan, "bulk estimate"

    origin = record.get("band_edge_origin", {})
    thermal = record.get("gap_temperature", {})
    entry = {
        "entry_id": ident,
        "source_file": source_file,
        "input_hash": input_hash,
        "formula": record.get("formula", ""),
        "provenance": record.get("provenance", ""),
        "energy_reference": record["energy_reference"],
        "structure_file": record.get("structure_file", ""),
        "structure_hash": structure_hash or "",
        # files an imported record was generated from (path -> SHA-256), for the change report
        "source_hashes": " ".join(f"{k}={v}" for k, v in sorted(record.get("sources", {}).items())),
        "dielectric_frame": diel["frame"],
        "normal_x": float(normal[0]), "normal_y": float(normal[1]), "normal_z": float(normal[2]),
        "normal_source": normal_source,
        **_tensor_columns("eps_inf", eps_inf),
        **_tensor_columns("eps_static", eps_0),
        "eps_rel_unc": float(diel.get("relative_uncertainty", math.nan)),
        "spacing_angstrom": float(spacing),
        "spacing_source": spacing_source,
        "lattice_angstrom": float(lattice),
        "lattice_source": lattice_source,
        "is_layered_structure": None if geometry is None else bool(geometry.is_layered),
        "vdw_gap_angstrom": math.nan if geometry is None or geometry.vdw_gap_angstrom is None
        else float(geometry.vdw_gap_angstrom),
        "r0_given_angstrom": float(r0),
        "r0_source": r0_source,
        "r0_rel_unc": float(screening.get("relative_uncertainty", math.nan)),
        "scissor_ev": float(record.get("scissor_ev", 0.0)),
        "scissor_unc_ev": float(record.get("scissor_uncertainty_ev", math.nan)),
        "edge_eps_top": float(origin.get("eps_top", 1.0)),
        "edge_eps_bottom": float(origin.get("eps_bottom", 1.0)),
        "edge_method": origin.get("method", "not stated"),
        "gap_t_form": thermal.get("form", ""),
        "gap_t_alpha_ev_per_k": float(thermal.get("alpha_ev_per_k", math.nan)),
        "gap_t_beta_k": float(thermal.get("beta_k", math.nan)),
        "gap_t_coupling": float(thermal.get("coupling", math.nan)),
        "gap_t_phonon_ev": float(thermal.get("phonon_energy_ev", math.nan)),
        "gap_t_reference_k": float(thermal.get("calculation_temperature_k", 0.0)) if thermal else math.nan,
    }

    valleys = []
    layer_edges = _layer_edge_keys(max_layers)
    for i, valley in enumerate(record["valleys"]):
        path = f"valleys[{i}]"
        inv, fit_info = _inverse_mass(valley, path, normal, warnings, None if prepared is None else prepared.get(i))
        mass = valley.get("mass", {})
        (xx, xy), (_, yy) = np.asarray(inv, dtype=float).tolist()
        edges = valley["edge_ev"]
        ignored = [k for k in edges if k != "bulk" and int(k) > max_layers]
        if ignored:
            warnings.append(f"{path}.edge_ev: layer counts {', '.join(ignored)} exceed max_layers and are not used")
        row = {
            "entry_id": ident,
            "valley_index": i,
            "input_hash": input_hash,
            "label": valley["label"],
            "band": valley["band"],
            **{column: float(edges[key]) if key in edges else math.nan for column, key in layer_edges},
            edge_column(0): float(valley["edge_ev"]["bulk"]),
            "inv_mass_xx": xx, "inv_mass_xy": xy, "inv_mass_yy": yy,
            **fit_info,
            "mass_rel_unc": float(mass.get("relative_uncertainty", math.nan)),
            "edge_unc_ev": float(valley.get("edge_uncertainty_ev", math.nan)),
            "degeneracy": float(valley.get("degeneracy", 1)),
            "spin_split_ev": float(valley.get("spin_split_ev", math.nan)),
            "edge_spin": _SPIN_CODE[valley.get("edge_spin", "")],
        }
        valleys.append(row)
    entry["warnings"] = " | ".join(warnings)
    return NormalizedRecord(entry, valleys, warnings)


def without_gapless(entries: list[dict], valleys: list[dict], *, max_layers: int,
                    fit_exponent: bool) -> tuple[list[dict], list[dict], list[tuple[dict, list[Problem]]]]:
    """Split normalised records into those with a gap at every layer count and the rest.

    The band edges of the layer counts a valley does not give are filled by the
    screen's layer model (:func:`lamellume.layers.fill_edges`, vectorised over
    all records); a record is kept when at every layer count 1..``max_layers``
    and bulk its lowest conduction edge (plus its scissor) lies above its highest
    valence edge (:func:`lamellume.layers.gap_character`). So an edge given for a
    layer count in one band only is checked against the other band's modelled
    edge, and no screen row can carry a negative gap.

    Parameters
    ----------
    entries, valleys : rows of :func:`normalize` (``entry_id`` links them), edges in eV.
    max_layers : largest layer count screened.
    fit_exponent : the layer model's setting (config ``layers.fit_exponent``).

    Returns
    -------
    (kept entries, kept valleys, [(entry, problems)] of the records without a gap)
    """
    from lamellume import layers as layer_model

    if not entries:
        return entries, valleys, []
    counts = np.array([*range(1, max_layers + 1), layer_model.BULK])
    columns = [edge_column(int(n)) for n in counts]
    index = {e["entry_id"]: i for i, e in enumerate(entries)}
    owner = np.array([index[v["entry_id"]] for v in valleys], dtype=int)
    order = np.argsort(owner, kind="stable")
    row = operator.itemgetter(*columns)
    edges = np.array([row(v) for v in valleys], dtype=float).reshape(len(valleys), len(counts))
    codes = pd.factorize(pd.Series([v["label"] for v in valleys], dtype=object))[0]
    is_cond = np.array([v["band"] == "conduction" for v in valleys], dtype=bool)
    filled = layer_model.fill_edges(edges[order], counts, fit_exponent=fit_exponent).filled_ev
    scissor = np.array([e["scissor_ev"] for e in entries], dtype=float)
    gaps = layer_model.gap_character(owner[order], codes[order], is_cond[order], filled, scissor_ev=scissor,
                                     n_compounds=len(entries)).fundamental_gap_ev
    bad_ids = {entries[i]["entry_id"] for i in np.flatnonzero(np.any(gaps <= 0, axis=1))}
    if not bad_ids:
        return entries, valleys, []
    rejected = []
    for entry in entries:
        if entry["entry_id"] in bad_ids:
            own = [v for v in valleys if v["entry_id"] == entry["entry_id"]]
            rejected.append((entry, layer_gap_problems(own, max_layers=max_layers, fit_exponent=fit_exponent,
                                                       scissor_ev=entry["scissor_ev"])))
    return ([e for e in entries if e["entry_id"] not in bad_ids],
            [v for v in valleys if v["entry_id"] not in bad_ids], rejected)


def layer_gap_problems(valleys: list[dict], *, max_layers: int, fit_exponent: bool,
                       scissor_ev: float) -> list[Problem]:
    """Layer counts at which one record, completed by the layer model, has no gap (the
    explanation behind :func:`without_gapless`).

    Each valley's edges at the layer counts it does not give are filled by
    :func:`lamellume.layers.fill_edges` (the screen's own model); then at every
    layer count 1..``max_layers`` and bulk the lowest conduction edge (plus the
    scissor) must lie above the highest valence edge
    (:func:`lamellume.layers.gap_character`). An edge given for a layer count in
    one band only is thereby checked against the other band's modelled edge.

    Parameters
    ----------
    valleys : valley rows of one record (from :func:`normalize`), edges in eV.
    max_layers : largest layer count screened.
    fit_exponent : the layer model's ``fit_exponent`` setting.
    scissor_ev : scissor shift added to conduction edges, eV.

    Returns
    -------
    list of Problem
        One per layer count without a gap; the field is the edge that was given
        (the valence maximum's if given, else the conduction minimum's).
    """
    from lamellume import layers as layer_model

    counts = [*range(1, max_layers + 1), layer_model.BULK]
    edges = np.array([[v[edge_column(n)] for n in counts] for v in valleys], dtype=float)
    filled = layer_model.fill_edges(edges, np.array(counts), fit_exponent=fit_exponent).filled_ev
    is_cond = np.array([v["band"] == "conduction" for v in valleys])
    # CBM - VBM at every layer count, as gap_character computes it (absent edges ignored);
    # only a record where it is not positive somewhere needs the full analysis below.
    with np.errstate(invalid="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # a layer count without any edge of a band
        vbm = np.nanmax(np.where(is_cond[:, None], np.nan, filled), axis=0)
        cbm = np.nanmin(np.where(is_cond[:, None], filled + scissor_ev, np.nan), axis=0)
    if not np.any(cbm - vbm <= 0):
        return []
    _, codes = np.unique([v["label"] for v in valleys], return_inverse=True)
    gaps = layer_model.gap_character(np.zeros(len(valleys), dtype=int), codes, is_cond, filled,
                                     scissor_ev=[scissor_ev], n_compounds=1)
    out = []
    for j, n in enumerate(counts):
        gap = gaps.fundamental_gap_ev[0, j]
        if not np.isfinite(gap) or gap > 0:
            continue
        key = "bulk" if n == layer_model.BULK else str(n)
        where = "in the bulk crystal" if n == layer_model.BULK else f"at {n} layer{'s' if n > 1 else ''}"
        vb = _extreme_valley(filled[:, j], ~is_cond, np.argmax)
        cb = _extreme_valley(filled[:, j], is_cond, np.argmin)

        def described(i: int) -> str:
            source = "given" if np.isfinite(edges[i, j]) else "from the layer model"
            return f"{filled[i, j]:.4g} eV ({valleys[i]['band']} valley {valleys[i]['label']!r}, {source})"

        shown = vb if np.isfinite(edges[vb, j]) else cb if np.isfinite(edges[cb, j]) else vb
        scissor = f" with the scissor {scissor_ev:+.4g} eV" if scissor_ev else ""
        out.append(Problem(
            f"valleys[{shown}].edge_ev.{key}",
            f"no gap {where}: the lowest conduction edge {described(cb)}{scissor} is not above the "
            f"highest valence edge {described(vb)}; give this layer count for both bands or check the value"))
    return out


def _extreme_valley(values: np.ndarray, mask: np.ndarray, pick) -> int:
    """Index (into all valleys) of the arg-extreme ``pick`` of ``values`` among ``mask``."""
    idx = np.flatnonzero(mask)
    return int(idx[pick(values[idx])])


ENTRY_COLUMNS = [
    "entry_id", "source_file", "input_hash", "formula", "provenance", "energy_reference",
    "structure_file", "structure_hash", "source_hashes", "dielectric_frame", "normal_x", "normal_y", "normal_z",
    "normal_source", *[f"eps_inf_{c}" for c, _, _ in TENSOR_COMPONENTS],
    *[f"eps_static_{c}" for c, _, _ in TENSOR_COMPONENTS], "eps_rel_unc", "spacing_angstrom",
    "spacing_source", "lattice_angstrom", "lattice_source", "is_layered_structure", "vdw_gap_angstrom",
    "r0_given_angstrom", "r0_source", "r0_rel_unc", "scissor_ev", "scissor_unc_ev", "edge_eps_top",
    "edge_eps_bottom", "edge_method", "gap_t_form", "gap_t_alpha_ev_per_k", "gap_t_beta_k", "gap_t_coupling",
    "gap_t_phonon_ev", "gap_t_reference_k", "warnings",
]


def valley_columns(max_layers: int) -> list[str]:
    """Columns of the valley table for a screen of 1..max_layers layers plus bulk."""
    return ["entry_id", "valley_index", "input_hash", "label", "band",
            *[edge_column(n) for n in range(1, max_layers + 1)], edge_column(0),
            "inv_mass_xx", "inv_mass_xy", "inv_mass_yy", "mass_perp_me", "mass_source",
            "mass_fit_rms_ev", "mass_nonparabolic", "mass_rel_unc", "edge_unc_ev", "degeneracy", "spin_split_ev",
            "edge_spin"]


def typed_frame(rows: list[dict], columns: list[str]) -> pd.DataFrame:
    """Rows as a DataFrame with a fixed type per column, also when there are no rows."""
    frame = pd.DataFrame(rows, columns=columns)
    types = {c: tables.pandas_dtype(c) for c in columns}  # declared once, in lamellume.tables
    return frame.astype(types)
