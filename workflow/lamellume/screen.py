"""Assemble the exciton screen of many compounds from their normalised rows.

Input: the entry and valley tables made by :mod:`lamellume.ingest` (one row
per compound, one per valley). Output: the long table (compound x layer count
x environment) and the wide table (one row per compound). Everything is
vectorized over compounds; the physics lives in the pure modules this file
calls, this module only wires arrays together and names the columns.

Model choices (see README, "Methods"):
* excitons are screened by the electronic (high-frequency) tensor;
* the bright exciton belongs to the lowest direct (same-label) valley pair at
  each layer count; the dark exciton to the fundamental (VBM, CBM) pair;
* the in-plane reduced mass of 2D models is the geometric mean of the
  principal reduced masses (:func:`lamellume.masses.inplane_average_mass_me`);
* bulk: isotropic 3D hydrogenic with sqrt(eps_par eps_perp) and the in-plane
  average mass; anisotropic variational when an out-of-plane mass is given;
  the bulk row's 2s/3s levels and radii come from the same model
  (:func:`lamellume.hydrogenic.bulk_exciton`);
* radius convention: ``radius_angstrom`` is the in-plane rms radius on every
  row (Rytova-Keldysh for layers, the bulk model for bulk); the 2D Mott density
  (layer rows, cm^-2) uses it, the 3D Mott density (bulk rows, cm^-3) the
  geometric mean of the bulk model's decay lengths;
* quasi-2D: 2D hydrogenic with the bulk constant (four times the 3D binding);
* N layers (N >= 1) in an environment: Rytova-Keldysh with r0(N) = N r0(1)
  and kappa = (eps_top + eps_bottom)/2; 2D hydrogenic and the Olsen et al.
  estimate as cross-checks.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np
import pandas as pd

from lamellume import dielectric, excitons, gapshift, keldysh, layers as layer_model, model, survival, tables
from lamellume.ingest import TENSOR_COMPONENTS, edge_column

BULK = layer_model.BULK
BULK_ENVIRONMENT = "bulk crystal"

def layer_counts(max_layers: int) -> np.ndarray:
    """Layer-count columns of the screen: 1..max_layers then bulk (0)."""
    return np.array(list(range(1, max_layers + 1)) + [BULK])


def layer_label(layers: np.ndarray) -> np.ndarray:
    """'1', '2', ... and 'bulk' for layer counts (0 = bulk)."""
    return np.where(np.asarray(layers) == BULK, "bulk", np.asarray(layers).astype(str))


def _tensor(entries: pd.DataFrame, prefix: str) -> np.ndarray:
    t = np.full((len(entries), 3, 3), np.nan)
    for name, i, j in TENSOR_COMPONENTS:
        t[:, i, j] = t[:, j, i] = entries[f"{prefix}_{name}"].to_numpy(dtype=float)
    return t


def valley_arrays(entries: pd.DataFrame, valleys: pd.DataFrame, lay: np.ndarray):
    """Valleys of the listed compounds as model arrays, sorted by (compound, valley_index).

    Returns (valley frame sorted, owner, label codes, raw edges (V, L) at ``lay``).
    Valleys of compounds not in ``entries`` are dropped.
    """
    owner = pd.Index(entries["entry_id"].to_numpy(dtype=object)).get_indexer(valleys["entry_id"])
    keep = owner >= 0
    vt = valleys[keep]
    owner = owner[keep]
    order = np.lexsort((vt["valley_index"].to_numpy(), owner))
    vt = vt.iloc[order].reset_index(drop=True)
    owner = owner[order]
    codes = model.label_codes(owner, vt["label"].astype(str).to_numpy())
    edges = vt[[edge_column(int(x)) for x in lay]].to_numpy(dtype=float).reshape(len(vt), len(lay))
    return vt, owner, codes, edges


def inverse_mass(valleys: pd.DataFrame) -> np.ndarray:
    """(V, 2, 2) in-plane inverse-mass tensors (1/m_e) of a valley frame."""
    w = np.empty((len(valleys), 2, 2))
    w[:, 0, 0] = valleys["inv_mass_xx"].to_numpy(dtype=float)
    w[:, 0, 1] = w[:, 1, 0] = valleys["inv_mass_xy"].to_numpy(dtype=float)
    w[:, 1, 1] = valleys["inv_mass_yy"].to_numpy(dtype=float)
    return w


_SPIN_WORD = {1: "up", -1: "down", 0: ""}


def exciton_inputs(valleys: pd.DataFrame) -> dict[str, np.ndarray]:
    """Valley degeneracy and spin sub-bands of a sorted valley frame, as model inputs."""
    return {"degeneracy": valleys["degeneracy"].fillna(1.0).to_numpy(dtype=float),
            "spin_split_ev": valleys["spin_split_ev"].to_numpy(dtype=float),
            "edge_spin": valleys["edge_spin"].fillna(0).to_numpy(dtype=np.int64)}


def pair_labels(pairs: excitons.Pairs, valleys: pd.DataFrame) -> np.ndarray:
    """Text of every valley pair, e.g. 'K->Q' or 'K(up)->K(down)', plus '' (last) for no pair."""
    labels = valleys["label"].astype(str).to_numpy()
    spin = valleys["edge_spin"].fillna(0).to_numpy(dtype=np.int64)

    def side(valley, offset):
        s = np.where(offset > 0, -spin[valley], spin[valley])
        return np.array([lab + (f"({_SPIN_WORD[int(x)]})" if x else "") for lab, x in zip(labels[valley], s)],
                        dtype=object)

    text = side(pairs.valence, pairs.valence_offset_ev) + "->" + side(pairs.conduction, pairs.conduction_offset_ev) \
        if len(pairs.compound) else np.zeros(0, dtype=object)
    return np.append(np.asarray(text, dtype=object), "")


def gap_thermal(entries: pd.DataFrame) -> gapshift.GapThermal:
    """Each compound's record ``gap_temperature`` (entry columns ``gap_t_*``) as model input."""
    form = entries["gap_t_form"].astype(object).map(gapshift.THERMAL_FORMS).fillna(0)
    return gapshift.GapThermal(
        form.to_numpy(dtype=np.int64), entries["gap_t_alpha_ev_per_k"].to_numpy(dtype=float),
        entries["gap_t_beta_k"].to_numpy(dtype=float), entries["gap_t_coupling"].to_numpy(dtype=float),
        entries["gap_t_phonon_ev"].to_numpy(dtype=float),
        entries["gap_t_reference_k"].fillna(0.0).to_numpy(dtype=float))


def environment_kappa(settings: Mapping) -> np.ndarray:
    """(top + bottom)/2 of every configured surroundings, in config order."""
    return np.array([(e["top"] + e["bottom"]) / 2 for e in settings["environments"].values()], dtype=float)


def screen_entries(entries: pd.DataFrame, valleys: pd.DataFrame, settings: Mapping,
                   table: keldysh.KeldyshTable, temperature_k: float | None = None,
                   ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Long and wide exciton tables for normalised compounds (see module docstring).

    The physics is one call of :func:`lamellume.model.evaluate`; this function
    prepares its input arrays and names the output columns. With
    ``temperature_k`` (the operating temperature), compounds whose record gives
    ``gap_temperature`` have every gap moved to it; the others stay at their
    calculation's temperature (wide columns ``gap_temperature_k``,
    ``gap_thermal_shift_ev``). Without it, the temperature of
    ``settings["survival"]`` when present, else none (no shift).
    """
    if temperature_k is None and "survival" in settings:
        temperature_k = float(settings["survival"]["temperature_k"])
    max_layers = int(settings["layers"]["max_layers"])
    lay = layer_counts(max_layers)
    env_names = list(settings["environments"])
    entries = entries.reset_index(drop=True)
    n = len(entries)
    ids = entries["entry_id"].to_numpy(dtype=object)
    valleys, owner, codes, raw_edges = valley_arrays(entries, valleys, lay)

    # Valley energies per layer count, dielectric constants in the layer frame.
    fill = layer_model.fill_edges(raw_edges, lay, fit_exponent=bool(settings["layers"]["fit_exponent"]))
    eps = dielectric.layer_constants(_tensor(entries, "eps_inf"))
    eps_static = dielectric.layer_constants(_tensor(entries, "eps_static"))
    eps_par, eps_perp, eps_bulk = eps.eps_parallel, eps.eps_perpendicular, eps.eps_bulk_effective
    spacing = entries["spacing_angstrom"].to_numpy(dtype=float)
    lattice = entries["lattice_angstrom"].to_numpy(dtype=float)

    thermal = gap_thermal(entries)
    res = model.evaluate(model.ModelInputs(
        layers=lay, owner=owner, label_code=codes, is_conduction=(valleys["band"] == "conduction").to_numpy(bool),
        edges_ev=fill.filled_ev, inv_mass=inverse_mass(valleys),
        mass_perp_me=valleys["mass_perp_me"].to_numpy(dtype=float),
        scissor_ev=entries["scissor_ev"].to_numpy(dtype=float), eps_parallel=eps_par, eps_perpendicular=eps_perp,
        eps_bulk=eps_bulk, spacing_angstrom=spacing,
        r0_given_angstrom=entries["r0_given_angstrom"].to_numpy(dtype=float),
        kappa=environment_kappa(settings), **exciton_inputs(valleys),
        edge_kappa=((entries["edge_eps_top"] + entries["edge_eps_bottom"]) / 2).fillna(1.0).to_numpy(dtype=float),
        gap_thermal=thermal, temperature_k=temperature_k),
        model.ModelSettings.from_config(settings), table)
    shifted = (thermal.form_code > 0) & (temperature_k is not None)
    gc, bright, dark = res.gap, res.pairs["bright"], res.pairs["dark"]
    cross = layer_model.layer_crossover(gc.is_direct, lay, known=gc.complete)
    jb = len(lay) - 1
    shape = res.stack["binding_ev"].shape
    bands = [(b["name"], b["min_nm"], b["max_nm"]) for b in settings["emission_bands"]]

    def gc_field(values):  # (n, L) -> (n, L-1, E) over environments
        return np.broadcast_to(values[:, :-1, None], shape)

    stack = {
        "layers": np.broadcast_to(lay[None, :-1, None], shape),
        "environment": np.broadcast_to(np.array(env_names, dtype=object)[None, None, :], shape),
        "kappa": res.stack["kappa"], "r0_angstrom": res.stack["r0_angstrom"],
        "binding_model": np.full(shape, "rytova-keldysh", dtype=object),
        **{k: res.stack[k] for k in ("binding_ev", "binding_2s_ev", "binding_3s_ev", "radius_angstrom",
                                     "binding_2d_hydrogenic_ev", "binding_olsen_ev", "dark_binding_ev")},
        "mu_inplane_me": gc_field(bright.mu_me), "mu_small_me": gc_field(bright.mu_small_me),
        "mu_large_me": gc_field(bright.mu_large_me), "mu_angle_deg": gc_field(bright.mu_angle_deg),
        "mu_dark_me": gc_field(dark.mu_me), "optical_gap_ev": res.stack["optical_gap_ev"],
    }
    bulk_rows = {
        "layers": np.full(n, BULK), "environment": np.full(n, BULK_ENVIRONMENT, dtype=object),
        "kappa": eps_bulk, "r0_angstrom": np.full(n, np.nan),
        **{k: res.bulk[k] for k in ("binding_model", "binding_ev", "binding_2s_ev", "binding_3s_ev",
                                    "radius_angstrom")},
        "binding_2d_hydrogenic_ev": res.bulk["quasi2d_binding_ev"], "binding_olsen_ev": np.full(n, np.nan),
        "dark_binding_ev": res.bulk["dark_binding_ev"],
        "mu_inplane_me": bright.mu_me[:, jb], "mu_small_me": bright.mu_small_me[:, jb],
        "mu_large_me": bright.mu_large_me[:, jb], "mu_angle_deg": bright.mu_angle_deg[:, jb],
        "mu_dark_me": dark.mu_me[:, jb], "optical_gap_ev": res.bulk["optical_gap_ev"],
    }
    per_layer = {
        "vbm_ev": gc.vbm_ev, "cbm_ev": gc.cbm_ev, "fundamental_gap_ev": gc.fundamental_gap_ev,
        "direct_gap_ev": gc.direct_gap_ev, "indirect_gap_ev": gc.indirect_gap_ev,
        "direct_margin_ev": gc.direct_margin_ev,
    }
    names = _label_names(owner, codes, valleys["label"].astype(str).to_numpy(), n)
    labels = {
        "vbm_label": names(gc.vbm_label), "cbm_label": names(gc.cbm_label),
        "direct_label": names(gc.direct_label),
        "gap_character": np.where(gc.complete, np.where(gc.is_direct, "direct", "indirect"), "unknown"),
    }
    entry_cols = {"entry_id": ids, "input_hash": entries["input_hash"].to_numpy(dtype=object)}

    few = {k: np.asarray(v).reshape(-1) for k, v in stack.items()}
    for k, v in {**per_layer, **labels}.items():
        few[k] = np.broadcast_to(np.asarray(v)[:, :-1, None], shape).reshape(-1)
    for k, v in entry_cols.items():
        few[k] = np.broadcast_to(v[:, None, None], shape).reshape(-1)
    bulk = dict(bulk_rows)
    for k, v in {**per_layer, **labels}.items():
        bulk[k] = np.asarray(v)[:, jb]
    bulk.update(entry_cols)
    long = pd.concat([pd.DataFrame(few), pd.DataFrame(bulk)], ignore_index=True)
    long["emission_nm"] = np.concatenate([res.stack["emission_nm"].reshape(-1), res.bulk["emission_nm"]])
    long["emission_band"] = layer_model.spectral_band(long["emission_nm"].to_numpy(dtype=float), bands) \
        if len(long) else np.zeros(0, dtype=object)
    is_bulk = long["layers"].to_numpy() == BULK
    long["mott_density_per_cm2"] = np.where(is_bulk, np.nan, survival.mott_density_2d_per_cm2(
        long["radius_angstrom"].to_numpy(dtype=float)))
    long["mott_density_3d_per_cm3"] = np.concatenate([
        np.full(int(np.prod(shape)), np.nan), survival.mott_density_3d_per_cm3(res.bulk["mott_radius_angstrom"])])
    pair_names = pair_labels(res.valley_pairs, valleys)
    for key in ("bright_exciton_ev", "dark_exciton_ev", "exciton_margin_ev", "brightness", "bright_weight",
                "dark_weight", "optical_gap_compensated_ev", "emission_compensated_nm", "radiative_rate_0_per_s",
                "bright_mass_me"):
        long[key] = np.concatenate([np.asarray(res.stack[key]).reshape(-1), np.asarray(res.bulk[key])])
    for key in ("bright", "dark"):
        idx = np.concatenate([res.stack[f"{key}_pair_index"].reshape(-1), res.bulk[f"{key}_pair_index"]])
        long[f"{key}_pair"] = pair_names[np.where(idx < 0, len(pair_names) - 1, idx)]
    long["binding_beyond_validity"] = excitons.binding_fraction_exceeds(
        long["binding_ev"].to_numpy(dtype=float), long["direct_gap_ev"].to_numpy(dtype=float),
        float(settings["excitons"]["max_binding_fraction"]))
    spin_given = np.zeros(n, dtype=bool)
    np.logical_or.at(spin_given, owner, valleys["edge_spin"].fillna(0).to_numpy(dtype=np.int64) != 0)
    long["spin_given"] = np.concatenate([np.broadcast_to(spin_given[:, None, None], shape).reshape(-1), spin_given])
    order_key = np.where(long["layers"].to_numpy() == BULK, 10_000, long["layers"].to_numpy())
    env_rank = {e: i for i, e in enumerate(env_names + [BULK_ENVIRONMENT])}
    long = long.assign(_l=order_key, _e=long["environment"].map(env_rank).astype(int)) \
        .sort_values(["entry_id", "_l", "_e"], kind="stable").drop(columns=["_l", "_e"]).reset_index(drop=True)
    front = ["entry_id", "layers", "environment", "gap_character", "fundamental_gap_ev", "direct_gap_ev",
             "optical_gap_ev", "emission_nm", "emission_band", "binding_ev", "binding_model"]
    long = long[front + [c for c in long.columns if c not in front]]
    long["layers"] = long["layers"].astype("int16")

    mu, mu_b = bright.mu_me, bright.mu_me[:, jb]
    eb_rk, opt_n, lam_n = res.stack["binding_ev"], res.stack["optical_gap_ev"], res.stack["emission_nm"]
    wide = pd.DataFrame({
        "entry_id": ids,
        "formula": entries["formula"].to_numpy(dtype=object),
        "input_hash": entry_cols["input_hash"],
        "eps_parallel": eps_par, "eps_perpendicular": eps_perp,
        "eps_inplane_anisotropy": eps.inplane_anisotropy,
        "eps_bulk": eps_bulk,
        "eps_static_parallel": eps_static.eps_parallel,
        "eps_static_perpendicular": eps_static.eps_perpendicular,
        "spacing_angstrom": spacing, "lattice_angstrom": lattice,
        "r0_monolayer_angstrom": res.r0_monolayer_angstrom,
        "r0_source": entries["r0_source"].to_numpy(dtype=object),
        "gap_character_1l": labels["gap_character"][:, 0],
        "bright_valley_1l": labels["direct_label"][:, 0],
        "gap_1l_ev": gc.fundamental_gap_ev[:, 0], "direct_gap_1l_ev": gc.direct_gap_ev[:, 0],
        "margin_1l_ev": gc.direct_margin_ev[:, 0],
        "gap_character_bulk": labels["gap_character"][:, jb],
        "gap_bulk_ev": gc.fundamental_gap_ev[:, jb], "direct_gap_bulk_ev": gc.direct_gap_ev[:, jb],
        **thinning_columns(cross, max_layers),
        "mu_1l_me": mu[:, 0], "mu_bulk_me": mu_b, "mu_bulk_perp_me": bright.mu_perp_me[:, jb],
        **{k: res.bulk[k] for k in ("bulk_binding_ev", "bulk_radius_angstrom", "bulk_binding_aniso_ev",
                                    "quasi2d_binding_ev", "quasi2d_radius_angstrom")},
        "bulk_optical_gap_ev": res.bulk["optical_gap_ev"],
        "gap_temperature_k": np.where(shifted, np.nan if temperature_k is None else float(temperature_k), np.nan),
        "gap_thermal_shift_ev": np.where(shifted, res.thermal_shift_ev, np.nan),
        "edge_fit_rms_ev": _per_compound_max(fill.residual_ev, owner, n),
        "warnings": entries["warnings"].to_numpy(dtype=object),
    })
    for e, name in enumerate(env_names):
        wide[f"binding_1l_ev__{name}"] = eb_rk[:, 0, e]
        wide[f"optical_gap_1l_ev__{name}"] = opt_n[:, 0, e]
        wide[f"emission_1l_nm__{name}"] = lam_n[:, 0, e]
    wide = wide.sort_values("entry_id", kind="stable").reset_index(drop=True)
    return long, wide


def _label_names(owner: np.ndarray, codes: np.ndarray, labels: np.ndarray, n: int):
    """Function mapping (n, L) label codes of the model to label text ('' for none)."""
    k = int(codes.max()) + 1 if len(codes) else 1
    table = np.full((n, k + 1), "", dtype=object)   # column k: NO_LABEL (-1) -> ""
    table[owner, codes] = labels

    def names(code: np.ndarray) -> np.ndarray:
        return table[np.arange(n)[:, None], np.where(code < 0, k, code)]
    return names


def _per_compound_max(values: np.ndarray, owner: np.ndarray, n: int) -> np.ndarray:
    """Largest finite value per compound (NaN for a compound without any)."""
    out = np.full(n, -np.inf)
    np.maximum.at(out, owner, np.where(np.isfinite(values), values, -np.inf))
    return np.where(np.isfinite(out), out, np.nan)


def thinning_columns(cross: layer_model.Crossover, max_layers: int) -> dict[str, object]:
    """The thinning columns of the wide table from the crossover of :func:`lamellume.layers.layer_crossover`.

    ``thinning_state`` (one of :data:`lamellume.tables.THINNING_STATES`),
    ``direct_through_layers`` and ``switch_layers`` (layer counts, empty where no
    such count exists: the library's sentinel codes never reach a table) and
    ``thinning_verdict`` (the state in words, with the layer counts).
    """
    through = np.asarray(cross.direct_through_layers)
    sw = np.asarray(cross.character_switch_layers)
    ml = np.asarray(cross.monolayer_direct)
    state = np.full(sw.shape, tables.UNKNOWN_BEYOND, dtype=object)
    never = sw == layer_model.NO_SWITCH
    only_bulk = sw == layer_model.BULK
    at_count = sw > 0
    state[never & ml] = tables.DIRECT_EVERYWHERE
    state[never & ~ml] = tables.INDIRECT_EVERYWHERE
    state[only_bulk & ml] = tables.DIRECT_EXCEPT_BULK
    state[only_bulk & ~ml] = tables.INDIRECT_EXCEPT_BULK
    state[at_count & ml] = tables.DIRECT_WHEN_THIN
    state[at_count & ~ml] = tables.INDIRECT_WHEN_THIN
    state[through == layer_model.UNDETERMINED] = tables.UNKNOWN_MONOLAYER  # monolayer not decided
    return {
        "thinning_state": state,
        "direct_through_layers": _layer_counts(through, through > 0),
        "switch_layers": _layer_counts(sw, at_count),
        "thinning_verdict": thinning_verdict(state, through, sw, max_layers),
    }


def _layer_counts(values: np.ndarray, present: np.ndarray) -> pd.arrays.IntegerArray:
    """Nullable int16 layer counts: ``values`` where ``present``, empty elsewhere."""
    return pd.arrays.IntegerArray(np.where(present, values, 0).astype("int16"), ~np.asarray(present, dtype=bool))


def thinning_verdict(state: np.ndarray, through: np.ndarray, switch: np.ndarray, max_layers: int) -> np.ndarray:
    """Plain-words summary of how the gap character changes with thinning.

    ``state`` holds :data:`lamellume.tables.THINNING_STATES` values; ``through`` and
    ``switch`` the direct-through and switch layer counts of each compound.
    """
    out = np.empty(len(state), dtype=object)
    for i, (kind, t, s) in enumerate(zip(state, through, switch)):
        t, s = int(t), int(s)
        if kind == tables.DIRECT_WHEN_THIN:
            text = (f"direct only as a monolayer, indirect from {s} layers" if s == 2
                    else f"direct up to {s - 1} layers, indirect from {s}")
        elif kind == tables.INDIRECT_WHEN_THIN:
            text = (f"indirect as a monolayer, direct from {s} layers" if s == 2
                    else f"indirect up to {s - 1} layers, direct from {s}")
        elif kind == tables.DIRECT_EXCEPT_BULK:
            text = f"direct up to {max_layers} layers, indirect in bulk"
        elif kind == tables.INDIRECT_EXCEPT_BULK:
            text = f"indirect up to {max_layers} layers, direct in bulk"
        elif kind == tables.UNKNOWN_MONOLAYER:
            text = "unknown: the record's band edges do not decide the monolayer's gap character"
        elif kind == tables.UNKNOWN_BEYOND:
            text = ((f"direct up to at least {t} layers" if t > 0 else "indirect as a monolayer")
                    + "; unknown at a thicker layer count (band edges missing)")
        else:
            text = str(kind)  # direct / indirect at every thickness: the state says it all
        out[i] = text
    return out
