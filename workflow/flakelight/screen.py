"""Assemble the exciton screen of many compounds from their normalised rows.

Input: the entry and valley tables made by :mod:`flakelight.ingest` (one row
per compound, one per valley). Output: the long table (compound x layer count
x environment) and the wide table (one row per compound). Everything is
vectorized over compounds; the physics lives in the pure modules this file
calls, this module only wires arrays together and names the columns.

Model choices (see README, "Methods"):
* excitons are screened by the electronic (high-frequency) tensor;
* the bright exciton belongs to the lowest direct (same-label) valley pair at
  each layer count; the dark exciton to the fundamental (VBM, CBM) pair;
* the in-plane reduced mass of 2D models is the geometric mean of the
  principal reduced masses (:func:`flakelight.masses.inplane_average_mass_me`);
* bulk: isotropic 3D hydrogenic with sqrt(eps_par eps_perp) and the in-plane
  average mass; anisotropic variational when an out-of-plane mass is given;
* quasi-2D: 2D hydrogenic with the bulk constant (four times the 3D binding);
* N layers (N >= 1) in an environment: Rytova-Keldysh with r0(N) = N r0(1)
  and kappa = (eps_top + eps_bottom)/2; 2D hydrogenic and the Olsen et al.
  estimate as cross-checks; the fractional-dimension interpolation.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np
import pandas as pd

from flakelight import dielectric, hydrogenic, keldysh, layers as layer_model, masses, survival
from flakelight.ingest import TENSOR_COMPONENTS, edge_column

BULK = layer_model.BULK
BULK_ENVIRONMENT = "bulk crystal"

UNITS: dict[str, str] = {}
DESCRIPTIONS: dict[str, str] = {}


def _col(name: str, unit: str, description: str) -> str:
    UNITS[name] = unit
    DESCRIPTIONS[name] = description
    return name


for _name, _unit, _desc in [
    ("layers", "1", "layer count; 0 = bulk crystal"),
    ("vbm_ev", "eV", "valence-band maximum on the record's energy reference"),
    ("cbm_ev", "eV", "conduction-band minimum including the scissor shift"),
    ("fundamental_gap_ev", "eV", "CBM - VBM"),
    ("direct_gap_ev", "eV", "lowest same-label (vertical) transition"),
    ("indirect_gap_ev", "eV", "lowest transition between different labels"),
    ("direct_margin_ev", "eV", "indirect - direct gap: > 0 bright, < 0 dark"),
    ("mu_inplane_me", "m_e", "in-plane reduced mass of the bright pair (geometric mean of principal values)"),
    ("mu_small_me", "m_e", "smaller principal in-plane reduced mass of the bright pair"),
    ("mu_large_me", "m_e", "larger principal in-plane reduced mass of the bright pair"),
    ("mu_dark_me", "m_e", "in-plane reduced mass of the fundamental (VBM, CBM) pair"),
    ("r0_angstrom", "Angstrom", "Rytova-Keldysh screening length of the N-layer stack"),
    ("kappa", "1", "mean dielectric constant of the surroundings (bulk rows: the crystal's sqrt(eps_par eps_perp))"),
    ("mu_angle_deg", "deg", "angle of the light principal reduced-mass axis from the layer-frame x axis"),
    ("binding_3s_ev", "eV", "3s binding energy (Rytova-Keldysh; 3D hydrogenic n=3 for bulk)"),
    ("dark_exciton_ev", "eV", "fundamental gap - dark binding: energy of the momentum-dark exciton (indirect cases)"),
    ("binding_ev", "eV", "bright-exciton binding energy of the row's model (binding_model)"),
    ("binding_2s_ev", "eV", "2s binding energy (Rytova-Keldysh; 3D hydrogenic n=2 for bulk)"),
    ("radius_angstrom", "Angstrom", "exciton radius of the row's model (rms for Rytova-Keldysh, Bohr radius for bulk)"),
    ("binding_2d_hydrogenic_ev", "eV", "2D hydrogenic binding with the configured constant"),
    ("binding_olsen_ev", "eV", "quick estimate of Olsen et al. (2016)"),
    ("binding_fractional_ev", "eV", "fractional-dimension interpolation (He 1991)"),
    ("dark_binding_ev", "eV", "binding of the fundamental-pair (momentum-dark) exciton"),
    ("optical_gap_ev", "eV", "direct gap - bright binding: lowest bright exciton energy"),
    ("emission_nm", "nm", "vacuum wavelength of the bright exciton"),
    ("mott_density_per_cm2", "cm^-2", "2D Mott density estimate 1/(pi r^2)"),
]:
    _col(_name, _unit, _desc)

for _name, _unit, _desc in [
    ("eps_parallel", "1", "in-plane electronic dielectric constant (mean of in-plane eigenvalues)"),
    ("eps_perpendicular", "1", "out-of-plane electronic dielectric constant"),
    ("eps_inplane_anisotropy", "1", "(max - min)/mean of in-plane eigenvalues"),
    ("eps_bulk", "1", "sqrt(eps_parallel eps_perpendicular)"),
    ("eps_static_parallel", "1", "in-plane static dielectric constant (if given)"),
    ("eps_static_perpendicular", "1", "out-of-plane static dielectric constant (if given)"),
    ("spacing_angstrom", "Angstrom", "interlayer repeat distance"),
    ("lattice_angstrom", "Angstrom", "in-plane lattice constant"),
    ("r0_monolayer_angstrom", "Angstrom", "monolayer screening length"),
    ("gap_1l_ev", "eV", "monolayer fundamental gap"),
    ("direct_gap_1l_ev", "eV", "monolayer lowest direct gap"),
    ("margin_1l_ev", "eV", "monolayer indirect - direct gap"),
    ("gap_bulk_ev", "eV", "bulk fundamental gap"),
    ("direct_gap_bulk_ev", "eV", "bulk lowest direct gap"),
    ("mu_1l_me", "m_e", "monolayer bright-pair in-plane reduced mass"),
    ("mu_bulk_me", "m_e", "bulk bright-pair in-plane reduced mass"),
    ("mu_bulk_perp_me", "m_e", "bulk bright-pair out-of-plane reduced mass"),
    ("bulk_binding_ev", "eV", "3D hydrogenic binding, geometric-mean constant"),
    ("bulk_radius_angstrom", "Angstrom", "3D Bohr radius, geometric-mean constant"),
    ("bulk_binding_aniso_ev", "eV", "anisotropic 3D variational binding"),
    ("quasi2d_binding_ev", "eV", "2D hydrogenic binding with the bulk constant (4x bulk)"),
    ("quasi2d_radius_angstrom", "Angstrom", "2D Bohr radius (1s decay length) with the bulk constant"),
    ("bulk_optical_gap_ev", "eV", "bulk direct gap - bulk binding"),
    ("edge_fit_rms_ev", "eV", "largest rms residual of the layer-count confinement fit over the compound's valleys"),
    ("binding_1l_ev", "eV", "monolayer Rytova-Keldysh binding in environment <env>"),
    ("optical_gap_1l_ev", "eV", "monolayer bright exciton energy in environment <env>"),
    ("emission_1l_nm", "nm", "monolayer emission wavelength in environment <env>"),
]:
    _col(_name, _unit, _desc)


def units_for(columns) -> dict[str, str]:
    """Units of a table's columns, including per-environment columns ``<base>__<env>``."""
    out = {}
    for c in columns:
        base = c.split("__")[0]
        if c in UNITS:
            out[c] = UNITS[c]
        elif base in UNITS:
            out[c] = UNITS[base]
    return out


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


def _pair_tables(owner, label_code, is_conduction, valleys, n, n_labels):
    """Inverse-mass tensors and perpendicular masses per (compound, label, band)."""
    inv = np.full((2, n, n_labels, 2, 2), np.nan)
    perp = np.full((2, n, n_labels), np.nan)
    w = np.empty((len(valleys), 2, 2))
    w[:, 0, 0] = valleys["inv_mass_xx"].to_numpy(dtype=float)
    w[:, 0, 1] = w[:, 1, 0] = valleys["inv_mass_xy"].to_numpy(dtype=float)
    w[:, 1, 1] = valleys["inv_mass_yy"].to_numpy(dtype=float)
    band = is_conduction.astype(int)
    inv[band, owner, label_code] = w
    perp[band, owner, label_code] = valleys["mass_perp_me"].to_numpy(dtype=float)
    return inv, perp


def _pick(table, rows, labels):
    """table[rows, labels] with NaN where a label is NO_LABEL."""
    safe = np.where(labels < 0, 0, labels)
    out = table[rows, safe]
    bad = labels < 0
    out[bad] = np.nan
    return out


def screen_entries(entries: pd.DataFrame, valleys: pd.DataFrame, settings: Mapping,
                   table: keldysh.KeldyshTable) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Long and wide exciton tables for normalised compounds (see module docstring)."""
    max_layers = int(settings["layers"]["max_layers"])
    lay = layer_counts(max_layers)
    env_names = list(settings["environments"])
    kappa = np.array([(e["top"] + e["bottom"]) / 2 for e in settings["environments"].values()])
    n = len(entries)
    ids = entries["entry_id"].to_numpy(dtype=object)
    index = pd.Index(ids)
    owner = index.get_indexer(valleys["entry_id"])
    order = np.argsort(owner, kind="stable")
    valleys = valleys.iloc[order].reset_index(drop=True)
    owner = owner[order]
    codes, uniques = pd.factorize(valleys["label"])
    codes = np.asarray(codes)
    n_labels = max(len(uniques), 1)
    is_cond = (valleys["band"] == "conduction").to_numpy(dtype=bool)
    edges = valleys[[edge_column(int(x)) for x in lay]].to_numpy(dtype=float)

    # Valley energies per layer count and the gap character.
    fill = layer_model.fill_edges(edges, lay, fit_exponent=bool(settings["layers"]["fit_exponent"]))
    scissor = entries["scissor_ev"].to_numpy(dtype=float)
    gc = layer_model.gap_character(owner, codes, is_cond, fill.filled_ev, scissor_ev=scissor, n_compounds=n)
    cross = layer_model.layer_crossover(gc.is_direct, lay, known=gc.complete)

    # Dielectric constants in the layer frame.
    eps = dielectric.layer_constants(_tensor(entries, "eps_inf"))
    eps_static = dielectric.layer_constants(_tensor(entries, "eps_static"))
    eps_par, eps_perp, eps_bulk = eps.eps_parallel, eps.eps_perpendicular, eps.eps_bulk_effective
    spacing = entries["spacing_angstrom"].to_numpy(dtype=float)
    lattice = entries["lattice_angstrom"].to_numpy(dtype=float)

    # Reduced masses of the bright (direct) and dark (fundamental) pairs per layer count.
    inv, perp = _pair_tables(owner, codes, is_cond, valleys, n, n_labels)
    rows = np.repeat(np.arange(n)[:, None], len(lay), axis=1)
    w_bright = _pick(inv[1], rows, gc.direct_label) + _pick(inv[0], rows, gc.direct_label)
    w_dark = _pick(inv[1], rows, gc.cbm_label) + _pick(inv[0], rows, gc.vbm_label)
    flat = w_bright.reshape(-1, 2, 2)
    good = np.all(np.isfinite(flat), axis=(1, 2))
    mu = np.full(flat.shape[0], np.nan)
    mu_small = np.full(flat.shape[0], np.nan)
    mu_large = np.full(flat.shape[0], np.nan)
    mu_angle = np.full(flat.shape[0], np.nan)
    if good.any():
        mu[good] = masses.inplane_average_mass_me(flat[good])
        mu_small[good], mu_large[good], mu_angle[good] = masses.principal_masses(flat[good])
    mu, mu_small, mu_large, mu_angle = (a.reshape(n, len(lay)) for a in (mu, mu_small, mu_large, mu_angle))
    flat_d = w_dark.reshape(-1, 2, 2)
    good_d = np.all(np.isfinite(flat_d), axis=(1, 2))
    mu_dark = np.full(flat_d.shape[0], np.nan)
    if good_d.any():
        mu_dark[good_d] = masses.inplane_average_mass_me(flat_d[good_d])
    mu_dark = mu_dark.reshape(n, len(lay))
    mperp = masses.reduced_mass_perpendicular(_pick(perp[1], rows, gc.direct_label),
                                              _pick(perp[0], rows, gc.direct_label))

    # Bulk models (last layer column is bulk).
    jb = len(lay) - 1
    mu_b, mperp_b = mu[:, jb], mperp[:, jb]
    bulk_eb = hydrogenic.binding_3d_ev(mu_b, eps_bulk)
    bulk_eb2 = hydrogenic.binding_3d_ev(mu_b, eps_bulk, n=2)
    bulk_a = hydrogenic.bohr_radius_3d_angstrom(mu_b, eps_bulk)
    has_perp = np.isfinite(mperp_b) & np.isfinite(mu_b)
    bulk_aniso = np.full(n, np.nan)
    if has_perp.any():
        bulk_aniso[has_perp] = hydrogenic.binding_3d_anisotropic(
            mu_b[has_perp], mperp_b[has_perp], eps_par[has_perp], eps_perp[has_perp]).binding_ev
    q2d_eb = hydrogenic.binding_2d_ev(mu_b, eps_bulk)
    q2d_a = hydrogenic.bohr_radius_2d_angstrom(mu_b, eps_bulk)
    bulk_best = np.where(np.isfinite(bulk_aniso), bulk_aniso, bulk_eb)
    bulk_model = np.where(np.isfinite(bulk_aniso), "3d-anisotropic", "3d-hydrogenic")

    # Few-layer stacks in each environment: Rytova-Keldysh and cross-checks.
    r0_given = entries["r0_given_angstrom"].to_numpy(dtype=float)
    r0_1 = np.where(np.isfinite(r0_given), r0_given,
                    keldysh.screening_length_from_bulk_angstrom(eps_par, spacing))
    nl = lay[:-1].astype(float)                                       # (L,)
    scale = nl if settings["monolayer"]["few_layer_r0_scaling"] else np.ones_like(nl)
    r0 = r0_1[:, None, None] * scale[None, :, None] * np.ones((1, 1, len(kappa)))  # (n, L, E)
    kap = np.broadcast_to(kappa[None, None, :], r0.shape)
    mu_n = np.broadcast_to(mu[:, :-1, None], r0.shape)
    mu_dark_n = np.broadcast_to(mu_dark[:, :-1, None], r0.shape)
    eb_rk = keldysh.keldysh_binding_ev(mu_n, r0, kap, table, state="1s")
    eb_rk2 = keldysh.keldysh_binding_ev(mu_n, r0, kap, table, state="2s")
    eb_rk3 = keldysh.keldysh_binding_ev(mu_n, r0, kap, table, state="3s")
    rad_rk = keldysh.keldysh_radius_angstrom(mu_n, r0, kap, table, state="1s")
    eb_dark = keldysh.keldysh_binding_ev(mu_dark_n, r0, kap, table, state="1s")
    h_eps = float(settings["monolayer"]["hydrogenic_eps"])
    eb_h2d = hydrogenic.binding_2d_ev(mu_n, eps_bulk[:, None, None] if h_eps <= 0 else h_eps)
    eb_olsen = keldysh.olsen_binding_ev(mu_n, r0, kap)
    alpha = hydrogenic.fractional_dimension_from_thickness(nl[None, :] * spacing[:, None], bulk_a[:, None])
    eb_frac = np.broadcast_to(hydrogenic.binding_fractional_ev(mu[:, :-1], eps_bulk[:, None], alpha)[:, :, None],
                              r0.shape)
    bands = [(b["name"], b["min_nm"], b["max_nm"]) for b in settings["emission_bands"]]

    def gc_field(field):  # (n, L) -> (n, L, E) over environments
        return np.broadcast_to(field[:, :-1, None], r0.shape)

    direct_n = gc_field(gc.direct_gap_ev)
    opt_n = layer_model.optical_gap_ev(direct_n, eb_rk)
    stack = {
        "layers": np.broadcast_to(lay[None, :-1, None], r0.shape),
        "environment": np.broadcast_to(np.array(env_names, dtype=object)[None, None, :], r0.shape),
        "kappa": kap, "r0_angstrom": r0,
        "binding_model": np.full(r0.shape, "rytova-keldysh", dtype=object),
        "binding_ev": eb_rk, "binding_2s_ev": eb_rk2, "binding_3s_ev": eb_rk3, "radius_angstrom": rad_rk,
        "binding_2d_hydrogenic_ev": eb_h2d, "binding_olsen_ev": eb_olsen, "binding_fractional_ev": eb_frac,
        "dark_binding_ev": np.where(gc_field(gc.is_direct), np.nan, eb_dark),
        "mu_inplane_me": mu_n, "mu_small_me": gc_field(mu_small), "mu_large_me": gc_field(mu_large),
        "mu_angle_deg": gc_field(mu_angle),
        "mu_dark_me": mu_dark_n, "optical_gap_ev": opt_n,
    }
    bulk_rows = {
        "layers": np.full(n, BULK), "environment": np.full(n, BULK_ENVIRONMENT, dtype=object),
        "kappa": eps_bulk, "r0_angstrom": np.full(n, np.nan),
        "binding_model": bulk_model, "binding_ev": bulk_best, "binding_2s_ev": bulk_eb2,
        "binding_3s_ev": hydrogenic.binding_3d_ev(mu_b, eps_bulk, n=3),
        "radius_angstrom": bulk_a, "binding_2d_hydrogenic_ev": q2d_eb, "binding_olsen_ev": np.full(n, np.nan),
        "binding_fractional_ev": np.full(n, np.nan),
        "dark_binding_ev": np.where(gc.is_direct[:, jb], np.nan,
                                    hydrogenic.binding_3d_ev(mu_dark[:, jb], eps_bulk)),
        "mu_inplane_me": mu_b, "mu_small_me": mu_small[:, jb], "mu_large_me": mu_large[:, jb],
        "mu_angle_deg": mu_angle[:, jb],
        "mu_dark_me": mu_dark[:, jb],
        "optical_gap_ev": layer_model.optical_gap_ev(gc.direct_gap_ev[:, jb], bulk_best),
    }
    per_layer = {
        "vbm_ev": gc.vbm_ev, "cbm_ev": gc.cbm_ev, "fundamental_gap_ev": gc.fundamental_gap_ev,
        "direct_gap_ev": gc.direct_gap_ev, "indirect_gap_ev": gc.indirect_gap_ev,
        "direct_margin_ev": gc.direct_margin_ev,
    }
    label_names = np.append(np.asarray(uniques, dtype=object), "")  # index -1 -> ""
    labels = {
        "vbm_label": label_names[gc.vbm_label], "cbm_label": label_names[gc.cbm_label],
        "direct_label": label_names[gc.direct_label],
        "gap_character": np.where(gc.complete, np.where(gc.is_direct, "direct", "indirect"), "unknown"),
    }
    entry_cols = {"entry_id": ids, "input_hash": entries["input_hash"].to_numpy(dtype=object)}

    few = {k: np.asarray(v).reshape(-1) for k, v in stack.items()}
    for k, v in {**per_layer, **labels}.items():
        few[k] = np.broadcast_to(np.asarray(v)[:, :-1, None], r0.shape).reshape(-1)
    for k, v in entry_cols.items():
        few[k] = np.broadcast_to(v[:, None, None], r0.shape).reshape(-1)
    bulk = dict(bulk_rows)
    for k, v in {**per_layer, **labels}.items():
        bulk[k] = np.asarray(v)[:, jb]
    bulk.update(entry_cols)
    long = pd.concat([pd.DataFrame(few), pd.DataFrame(bulk)], ignore_index=True)
    long["emission_nm"] = layer_model.emission_wavelength_nm(long["optical_gap_ev"].to_numpy(dtype=float))
    long["emission_band"] = layer_model.spectral_band(long["emission_nm"].to_numpy(dtype=float), bands) \
        if len(long) else np.zeros(0, dtype=object)
    long["mott_density_per_cm2"] = _mott(long)
    long["dark_exciton_ev"] = long["fundamental_gap_ev"] - long["dark_binding_ev"]
    order_key = np.where(long["layers"].to_numpy() == BULK, 10_000, long["layers"].to_numpy())
    env_rank = {e: i for i, e in enumerate(env_names + [BULK_ENVIRONMENT])}
    long = long.assign(_l=order_key, _e=long["environment"].map(env_rank).astype(int)) \
        .sort_values(["entry_id", "_l", "_e"], kind="stable").drop(columns=["_l", "_e"]).reset_index(drop=True)
    front = ["entry_id", "layers", "environment", "gap_character", "fundamental_gap_ev", "direct_gap_ev",
             "optical_gap_ev", "emission_nm", "emission_band", "binding_ev", "binding_model"]
    long = long[front + [c for c in long.columns if c not in front]]
    long["layers"] = long["layers"].astype("int16")

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
        "r0_monolayer_angstrom": r0_1,
        "r0_source": entries["r0_source"].to_numpy(dtype=object),
        "gap_character_1l": labels["gap_character"][:, 0],
        "bright_valley_1l": labels["direct_label"][:, 0],
        "gap_1l_ev": gc.fundamental_gap_ev[:, 0], "direct_gap_1l_ev": gc.direct_gap_ev[:, 0],
        "margin_1l_ev": gc.direct_margin_ev[:, 0],
        "gap_character_bulk": labels["gap_character"][:, jb],
        "gap_bulk_ev": gc.fundamental_gap_ev[:, jb], "direct_gap_bulk_ev": gc.direct_gap_ev[:, jb],
        "direct_through_layers": cross.direct_through_layers.astype("int16"),
        "character_switch_layers": cross.character_switch_layers.astype("int16"),
        "thinning_verdict": thinning_verdict(cross, max_layers),
        "mu_1l_me": mu[:, 0], "mu_bulk_me": mu_b, "mu_bulk_perp_me": mperp_b,
        "bulk_binding_ev": bulk_eb, "bulk_radius_angstrom": bulk_a, "bulk_binding_aniso_ev": bulk_aniso,
        "quasi2d_binding_ev": q2d_eb, "quasi2d_radius_angstrom": q2d_a,
        "bulk_optical_gap_ev": bulk_rows["optical_gap_ev"],
        "edge_fit_rms_ev": _per_compound_max(fill.residual_ev, owner, n),
        "warnings": entries["warnings"].to_numpy(dtype=object),
    })
    for e, name in enumerate(env_names):
        wide[f"binding_1l_ev__{name}"] = eb_rk[:, 0, e]
        wide[f"optical_gap_1l_ev__{name}"] = opt_n[:, 0, e]
        wide[f"emission_1l_nm__{name}"] = layer_model.emission_wavelength_nm(opt_n[:, 0, e])
    wide = wide.sort_values("entry_id", kind="stable").reset_index(drop=True)
    return long, wide


def _per_compound_max(values: np.ndarray, owner: np.ndarray, n: int) -> np.ndarray:
    """Largest finite value per compound (NaN for a compound without any)."""
    out = np.full(n, -np.inf)
    np.maximum.at(out, owner, np.where(np.isfinite(values), values, -np.inf))
    return np.where(np.isfinite(out), out, np.nan)


def _mott(long: pd.DataFrame) -> np.ndarray:
    return survival.mott_density_2d_per_cm2(long["radius_angstrom"].to_numpy(dtype=float))


def thinning_verdict(cross: layer_model.Crossover, max_layers: int) -> np.ndarray:
    """Plain-words summary of how the gap character changes with thinning."""
    dtl = np.asarray(cross.direct_through_layers)
    sw = np.asarray(cross.character_switch_layers)
    ml = np.asarray(cross.monolayer_direct)
    out = np.full(dtl.shape, "undetermined", dtype=object)
    out[(sw == layer_model.NO_SWITCH) & ml] = "direct at every thickness"
    out[(sw == layer_model.NO_SWITCH) & ~ml] = "indirect at every thickness"
    out[(sw == BULK) & ml] = f"direct up to {max_layers} layers, indirect in bulk"
    out[(sw == BULK) & ~ml] = f"indirect up to {max_layers} layers, direct in bulk"
    sw_pos = sw > 0
    direct_then = sw_pos & ml
    indirect_then = sw_pos & ~ml
    out[direct_then] = [f"direct only as a monolayer, indirect from {s} layers" if s == 2
                        else f"direct up to {s - 1} layers, indirect from {s}" for s in sw[direct_then]]
    out[indirect_then] = [f"indirect as a monolayer, direct from {s} layers" if s == 2
                          else f"indirect up to {s - 1} layers, direct from {s}" for s in sw[indirect_then]]
    return out
