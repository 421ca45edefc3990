"""The exciton model: one pure function from input arrays to every exciton quantity.

:func:`evaluate` is the only place where the model chain is written: gap
character per layer count, pair selection, reduced masses, r0(N), binding
energies, optical gap and emission. It is called once with the nominal inputs
(:func:`lamellume.screen.screen_entries`) and once per block of Monte Carlo
samples (:mod:`lamellume.uncertainty`), where every sample is one more
"compound" row of the same arrays. Sampling only changes the inputs.

Axes
----
``n`` compounds (Monte Carlo: entry x sample), ``V`` valleys (sorted by
compound), ``L`` layer counts (the last one must be bulk, ``layers == 0``),
``F = L - 1`` few-layer counts, ``E`` surroundings.

Structure (where a new quantity goes)
-------------------------------------
1. :func:`lamellume.layers.gap_character` on the valley edges: per
   (compound, layer count) band extrema and labels.
2. Exciton pairs (:data:`PAIRS`): each pair is a (valence label, conduction
   label) choice per (compound, layer count), read off the gap character
   (``bright``: the lowest direct pair; ``dark``: the fundamental (VBM, CBM)
   pair). :func:`pair_masses` turns any such choice into reduced masses, so a
   new pair (e.g. every valley pair for an exciton-level brightness) is one
   more entry of the selection, not a new chain.
3. :func:`_stack` : per (compound, few-layer count, surroundings) quantities
   (Rytova-Keldysh binding and its cross-checks, optical gap, emission).
4. :func:`_bulk` : per compound bulk-crystal quantities.

Each quantity is computed only when requested (:class:`ModelSettings`), so the
Monte Carlo asks for the few it needs. A new quantity: compute it in step 3 or
4 under ``if want(<name>)`` from the pure physics modules, add its name to
:data:`STACK_QUANTITIES` or :data:`BULK_QUANTITIES`, and declare its output
column in :mod:`lamellume.tables`.

Model choices are those of the README ("Methods"), listed in
:mod:`lamellume.screen`.

References
----------
Rytova-Keldysh: N. S. Rytova, Moscow Univ. Phys. Bull. 22, 30 (1967);
L. V. Keldysh, JETP Lett. 29, 658 (1979). Others: see the called functions.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import NamedTuple

import numpy as np

from lamellume import brightness, excitons, gapshift, hydrogenic, keldysh, layers as layer_model, masses

BULK = layer_model.BULK

#: Exciton-level quantities (:func:`_exciton_level`), in ``stack`` and ``bulk`` alike.
EXCITON_QUANTITIES = ("bright_exciton_ev", "dark_exciton_ev", "exciton_margin_ev", "brightness",
                      "bright_pair_index", "dark_pair_index", "bright_weight", "dark_weight",
                      "optical_gap_compensated_ev", "emission_compensated_nm", "radiative_rate_0_per_s",
                      "bright_mass_me")
#: Requests that need the exciton level (the optical gap is the lowest bright exciton).
_EXCITON_TRIGGERS = frozenset(EXCITON_QUANTITIES) | {"optical_gap_ev", "emission_nm"}

#: Per (compound, few-layer count, surroundings) quantities :func:`evaluate` can return.
STACK_QUANTITIES = frozenset({
    "r0_angstrom", "kappa", "binding_ev", "binding_2s_ev", "binding_3s_ev", "radius_angstrom",
    "binding_2d_hydrogenic_ev", "binding_olsen_ev", "dark_binding_ev",
    "optical_gap_ev", "emission_nm", *EXCITON_QUANTITIES,
})
#: Per compound bulk quantities :func:`evaluate` can return (long-table names for the bulk
#: row, wide-table names for the bulk model columns).
BULK_QUANTITIES = frozenset({
    "binding_ev", "binding_model", "binding_2s_ev", "binding_3s_ev", "radius_angstrom", "mott_radius_angstrom",
    "dark_binding_ev", "optical_gap_ev", "emission_nm",
    "bulk_binding_ev", "bulk_binding_aniso_ev", "bulk_radius_angstrom", "quasi2d_binding_ev",
    "quasi2d_radius_angstrom",
    *EXCITON_QUANTITIES,
})

#: Bulk quantities of the bulk model (:func:`lamellume.hydrogenic.bulk_exciton`), which needs the
#: out-of-plane masses.
_NEEDS_BULK_MODEL = frozenset({"binding_ev", "binding_model", "binding_2s_ev", "binding_3s_ev", "radius_angstrom",
                               "mott_radius_angstrom", "bulk_binding_aniso_ev", "bulk_radius_angstrom",
                               "optical_gap_ev", "emission_nm"})


@dataclass(frozen=True)
class ModelInputs:
    """Input arrays of the model (units in the names; NaN = not given).

    Attributes
    ----------
    layers : (L,) int
        Layer counts of the ``edges_ev`` columns; the last must be bulk (0).
    owner : (V,) int
        Compound index of each valley, sorted ascending.
    label_code : (V,) int
        Label code of each valley (>= 0); on ties the smallest code wins, so
        codes should follow the labels' lexical order within a compound.
    is_conduction : (V,) bool
    edges_ev : (V, L)
        Filled band edges in eV (before the scissor shift).
    inv_mass : (V, 2, 2)
        In-plane inverse-mass tensors in 1/m_e.
    mass_perp_me : (V,)
        Out-of-plane masses in m_e (NaN if not given).
    scissor_ev : (n,)
        Scissor shift of the conduction edges, eV.
    eps_parallel, eps_perpendicular, eps_bulk : (n,)
        Electronic dielectric constants in the layer frame and sqrt(eps_par eps_perp).
    spacing_angstrom : (n,)
        Interlayer repeat distance.
    r0_given_angstrom : (n,)
        Given monolayer screening length (NaN: estimated from eps_parallel and spacing).
    r0_factor : (n,) or float
        Factor on the monolayer screening length (1 for the point estimate).
    degeneracy : (V,) or None
        Valley degeneracy (symmetry-equivalent points of the label; None: 1).
    spin_split_ev, edge_spin : (V,) or None
        Spin sub-bands (:func:`lamellume.excitons.spin_subbands`; None: not given).
    valley_pairs : lamellume.excitons.Pairs or None
        :func:`lamellume.excitons.valley_pairs` of owner, label_code,
        is_conduction and the spin sub-bands, when the caller has them already
        (the Monte Carlo builds them once per record and repeats them per
        sample, :func:`lamellume.excitons.repeat_pairs`); None: built here.
    binding_factor_layers, binding_factor_bulk : (n,) or float
        Factor on every Rytova-Keldysh (layers) or bulk 3D binding: the binding
        model's own error, sampled by the Monte Carlo (1 for the point estimate).
    edge_kappa : (n,) or float
        Mean dielectric constant of the surroundings the band edges belong to
        (record ``band_edge_origin``; 1 = suspended).
    kappa : (E,)
        Mean dielectric constant of each surroundings, (top + bottom)/2.
    gap_thermal : lamellume.gapshift.GapThermal of (n,) arrays, or None
        Temperature dependence of each compound's gaps (record ``gap_temperature``).
    temperature_k : float or None
        Operating temperature: with ``gap_thermal``, every gap of a compound
        that gives a form is moved from its calculation's temperature to this
        one (:func:`lamellume.gapshift.thermal_gap_change_ev`, added to the
        scissor shift); None leaves every gap at the calculation's temperature.
    """

    layers: np.ndarray
    owner: np.ndarray
    label_code: np.ndarray
    is_conduction: np.ndarray
    edges_ev: np.ndarray
    inv_mass: np.ndarray
    mass_perp_me: np.ndarray
    scissor_ev: np.ndarray
    eps_parallel: np.ndarray
    eps_perpendicular: np.ndarray
    eps_bulk: np.ndarray
    spacing_angstrom: np.ndarray
    r0_given_angstrom: np.ndarray
    kappa: np.ndarray
    r0_factor: np.ndarray | float = 1.0
    degeneracy: np.ndarray | None = None
    spin_split_ev: np.ndarray | None = None
    edge_spin: np.ndarray | None = None
    valley_pairs: excitons.Pairs | None = None
    binding_factor_layers: np.ndarray | float = 1.0
    binding_factor_bulk: np.ndarray | float = 1.0
    edge_kappa: np.ndarray | float = 1.0
    gap_thermal: gapshift.GapThermal | None = None
    temperature_k: float | None = None

    @property
    def n_compounds(self) -> int:
        return int(np.asarray(self.scissor_ev).shape[0])


@dataclass(frozen=True)
class ModelSettings:
    """Model switches (config section ``monolayer``) and the quantities wanted.

    ``stack`` and ``bulk`` name the quantities to compute (default: all of
    :data:`STACK_QUANTITIES` / :data:`BULK_QUANTITIES`); ``principal_masses``
    adds the principal masses and angle of the bright pair; ``indirect_gap``
    the gap character's indirect gap, direct margin and extrema labels
    (:func:`lamellume.layers.gap_character` ``indirect``; the dark pair needs
    them whatever this says).

    ``exciton_environments``: the surroundings (indices into
    ``ModelInputs.kappa``) where the exciton level of the stack is resolved in
    full, every pair's exciton and every :data:`EXCITON_QUANTITIES` entry;
    None: all of them. In the others only the bright pairs' excitons are
    computed, for the lowest bright one: ``bright_exciton_ev``,
    ``bright_pair_index``, ``optical_gap_ev`` and ``emission_nm`` there are
    those of the full model, the other exciton-level quantities are NaN
    (pair indices NO_PAIR, verdict "unknown": not resolved). The Monte Carlo
    reads the exciton level in the ranking surroundings only.
    """

    few_layer_r0_scaling: bool = True
    hydrogenic_eps: float = 0.0
    stack: frozenset = STACK_QUANTITIES
    bulk: frozenset = BULK_QUANTITIES
    principal_masses: bool = True
    indirect_gap: bool = True
    exciton_environments: tuple | None = None

    @classmethod
    def from_config(cls, settings, **wanted) -> "ModelSettings":
        """From the config sections (``settings["monolayer"]``) and optional wanted sets."""
        mono = settings["monolayer"]
        return cls(few_layer_r0_scaling=bool(mono["few_layer_r0_scaling"]),
                   hydrogenic_eps=float(mono["hydrogenic_eps"]), **wanted)


class PairMasses(NamedTuple):
    """Reduced masses of one exciton pair choice; every field is (n, L).

    ``mu_small_me``, ``mu_large_me``, ``mu_angle_deg`` and ``mu_perp_me`` are
    None unless requested.
    """

    valence_label: np.ndarray
    conduction_label: np.ndarray
    mu_me: np.ndarray
    mu_small_me: np.ndarray | None = None
    mu_large_me: np.ndarray | None = None
    mu_angle_deg: np.ndarray | None = None
    mu_perp_me: np.ndarray | None = None


@dataclass
class ModelResult:
    """Output of :func:`evaluate`.

    ``thermal_shift_ev`` (n,): change of every gap from the calculation's
    temperature to the operating one (0 where no thermal form is given or no
    temperature was asked for). ``gap``: the :class:`lamellume.layers.GapCharacter` (n, L; its
    indirect fields None unless ``ModelSettings.indirect_gap``); ``pairs``:
    :class:`PairMasses` per pair name of :data:`PAIRS`; ``r0_monolayer_angstrom``
    (n,); ``stack``: (n, F, E) arrays of the few-layer counts; ``bulk``: (n,)
    arrays of the bulk crystal.
    """

    gap: layer_model.GapCharacter
    pairs: dict[str, PairMasses]
    r0_monolayer_angstrom: np.ndarray
    stack: dict[str, np.ndarray] = field(default_factory=dict)
    bulk: dict[str, np.ndarray] = field(default_factory=dict)
    valley_pairs: excitons.Pairs | None = None
    thermal_shift_ev: np.ndarray | None = None


#: Exciton pairs: name -> (valence label, conduction label) fields of the gap character.
PAIRS = {
    "bright": ("direct_label", "direct_label"),   # lowest direct (same-label) pair
    "dark": ("vbm_label", "cbm_label"),           # fundamental pair (momentum-dark when indirect)
}


class ValleyTable(NamedTuple):
    """Valley index by (band: 0 valence, 1 conduction; compound; label code), (2, n, K), -1 where the
    compound has no such valley; and the valleys' inverse-mass tensors (V, 2, 2) and out-of-plane masses (V,)."""

    valley: np.ndarray
    inv_mass: np.ndarray
    mass_perp_me: np.ndarray


def label_codes(owner: np.ndarray, labels: np.ndarray) -> np.ndarray:
    """Dense label codes in lexical order within each compound (0, 1, ... per compound).

    Ties between degenerate valleys resolve to the smallest code, i.e. the
    lexically smallest label of the compound, whatever else shares the arrays.
    ``owner`` need not be sorted.
    """
    owner = np.asarray(owner)
    code = np.zeros(len(owner), dtype=np.int64)
    if not len(owner):
        return code
    _, lex = np.unique(np.asarray(labels).astype(str), return_inverse=True)  # global lexical code
    o2 = np.lexsort((lex, owner))
    step = np.ones(len(owner), dtype=np.int64)
    step[1:] = (owner[o2][1:] != owner[o2][:-1]) | (lex[o2][1:] != lex[o2][:-1])
    dense = np.cumsum(step)
    start = np.ones(len(owner), dtype=bool)
    start[1:] = owner[o2][1:] != owner[o2][:-1]
    base = np.maximum.accumulate(np.where(start, dense, 0))
    code[o2] = dense - base
    return code


def valley_table(inputs: ModelInputs) -> ValleyTable:
    """Mass look-up table by (band: 0 valence, 1 conduction; compound; label code)."""
    n = inputs.n_compounds
    code = np.asarray(inputs.label_code)
    n_labels = int(code.max()) + 1 if code.size else 1
    band = np.asarray(inputs.is_conduction, dtype=bool).astype(int)
    valley = np.full((2, n, n_labels), -1, dtype=np.int64)
    valley[band, inputs.owner, code] = np.arange(code.size)
    return ValleyTable(valley, np.asarray(inputs.inv_mass, dtype=float), np.asarray(inputs.mass_perp_me, dtype=float))


def _pick(table: ValleyTable, band: int, labels: np.ndarray, values: np.ndarray) -> np.ndarray:
    """values[valley of (band, c, labels[c, j])] for every compound c and column j; NaN where there is none."""
    index = table.valley[band]
    n, k = index.shape
    # np.take of the flattened (compound, label) axis, then of the valleys' rows: the rows of fancy indexing, faster
    at = np.take(index.reshape(-1), np.arange(n)[:, None] * k + np.where(labels < 0, 0, labels))
    at[labels < 0] = -1
    if not len(values):
        return np.full(at.shape + values.shape[1:], np.nan)
    out = np.take(values, np.maximum(at, 0), axis=0)
    out[at < 0] = np.nan
    return out


def pair_masses(table: ValleyTable, valence_label: np.ndarray, conduction_label: np.ndarray,
                principal: bool = False, perpendicular: bool = False) -> PairMasses:
    """Reduced masses of a (valence label, conduction label) choice per (compound, layer count).

    The reduced inverse-mass tensor is the sum of the electron's and the hole's
    (:func:`lamellume.masses.reduced_inverse_mass_tensor`); its in-plane
    average is the geometric mean of the principal reduced masses
    (:func:`lamellume.masses.inplane_average_mass_me`).
    """
    w = _pick(table, 1, conduction_label, table.inv_mass) + _pick(table, 0, valence_label, table.inv_mass)
    good = masses.finite_tensor(w)
    mu = np.where(good, masses.inplane_average_mass_me(w), np.nan)
    small = large = angle = perp = None
    if principal:
        with np.errstate(invalid="ignore", divide="ignore"):
            small, large, angle = (np.where(good, a, np.nan) for a in masses.principal_masses(w))
    if perpendicular:
        perp = masses.reduced_mass_perpendicular(_pick(table, 1, conduction_label, table.mass_perp_me),
                                                 _pick(table, 0, valence_label, table.mass_perp_me))
    return PairMasses(valence_label, conduction_label, mu, small, large, angle, perp)


def evaluate(inputs: ModelInputs, settings: ModelSettings, table: keldysh.KeldyshTable) -> ModelResult:
    """Every exciton quantity of the model for the given input arrays (see the module docstring).

    Parameters
    ----------
    inputs : ModelInputs
    settings : ModelSettings
    table : lamellume.keldysh.KeldyshTable
        Rytova-Keldysh binding and radius table.

    Returns
    -------
    ModelResult
    """
    lay = np.asarray(inputs.layers)
    if lay.size < 2 or lay[-1] != BULK or np.any(lay[:-1] == BULK):
        raise ValueError("layers must list the few-layer counts followed by bulk (0)")
    n = inputs.n_compounds
    thermal = np.zeros(n)
    if inputs.gap_thermal is not None and inputs.temperature_k is not None:
        # Every gap of the compound moves with temperature alike: one shift of the conduction edges,
        # applied where the scissor is, so every later step sees gaps at the operating temperature.
        thermal = gapshift.thermal_gap_change_ev(inputs.gap_thermal, inputs.temperature_k)
        inputs = replace(inputs, scissor_ev=np.asarray(inputs.scissor_ev, dtype=float) + thermal, gap_thermal=None)
    want_dark = "dark_binding_ev" in settings.stack or "dark_binding_ev" in settings.bulk
    gap = layer_model.gap_character(inputs.owner, inputs.label_code, inputs.is_conduction, inputs.edges_ev,
                                    scissor_ev=inputs.scissor_ev, n_compounds=n,
                                    indirect=settings.indirect_gap or want_dark)
    vt = valley_table(inputs)
    pairs = {"bright": pair_masses(vt, gap.direct_label, gap.direct_label, principal=settings.principal_masses,
                                   perpendicular=bool(settings.bulk & _NEEDS_BULK_MODEL))}
    if want_dark:
        pairs["dark"] = pair_masses(vt, gap.vbm_label, gap.cbm_label)
    r0_given = np.asarray(inputs.r0_given_angstrom, dtype=float)
    r0_1 = np.where(np.isfinite(r0_given), r0_given,
                    keldysh.screening_length_from_bulk_angstrom(inputs.eps_parallel, inputs.spacing_angstrom)) \
        * inputs.r0_factor
    result = ModelResult(gap, pairs, r0_1, thermal_shift_ev=thermal)
    result.bulk = _bulk(inputs, settings, gap, pairs)
    result.stack = _stack(inputs, settings, table, gap, pairs, r0_1)
    if (settings.stack | settings.bulk) & _EXCITON_TRIGGERS:
        result.valley_pairs = _exciton_level(inputs, settings, table, r0_1, result)
    return result


def _exciton_level(inputs: ModelInputs, settings: ModelSettings, table, r0_1, result: ModelResult):
    """The exciton of every valence x conduction valley pair; lowest bright and dark ones.

    Each pair (:func:`lamellume.excitons.valley_pairs`, spin sub-bands
    included) binds with its own reduced mass: Rytova-Keldysh for layers, the
    bulk model for bulk (anisotropic 3D where both out-of-plane masses are
    given, else 3D hydrogenic with sqrt(eps_par eps_perp)). The lowest bright
    exciton becomes ``optical_gap_ev`` (and the emission) where its energy is
    positive (:func:`lamellume.layers.optical_gap_of_exciton_ev`; NaN where the
    binding reaches the pair's direct gap); the stack and bulk dicts gain
    :data:`EXCITON_QUANTITIES` (the stack's in full in the surroundings of
    ``ModelSettings.exciton_environments``, :func:`_stack_excitons`).
    """
    n = inputs.n_compounds
    pr = inputs.valley_pairs
    if pr is None:
        pr = excitons.valley_pairs(inputs.owner, inputs.label_code, inputs.is_conduction,
                                   inputs.spin_split_ev, inputs.edge_spin)
    c = pr.compound
    gaps = excitons.pair_gaps_ev(pr, inputs.edges_ev, inputs.scissor_ev)          # (P, L)
    w = excitons.pair_inverse_mass(pr, inputs.inv_mass)
    good = masses.finite_tensor(w)
    with np.errstate(invalid="ignore", divide="ignore"):
        mu = np.where(good, masses.inplane_average_mass_me(w), np.nan)
    deg = excitons.pair_degeneracy(pr, np.ones(len(inputs.owner)) if inputs.degeneracy is None
                                   else inputs.degeneracy)
    f_bulk = np.broadcast_to(np.asarray(inputs.binding_factor_bulk, dtype=float), (n,))

    def fill(out: dict, wanted: frozenset, energy, dimension, compensated=None, rate=None):
        lev = excitons.lowest_excitons(c, energy, pr.bright, n)
        pick = np.maximum(lev.bright_pair, 0)
        found = lev.bright_pair >= 0
        # centre-of-mass masses of the selected pairs only (the weights and the bright mass need no other),
        # the bright and the dark ones in one call
        both = np.stack([lev.bright_pair, lev.dark_pair])
        both = excitons.pair_total_mass_me(pr, inputs.inv_mass, np.maximum(both, 0)) if len(c) \
            else np.full(both.shape, np.nan)
        total = {"bright": both[0], "dark": both[1]}
        out["bright_mass_me"] = np.where(found, total["bright"], np.nan)
        if rate is None:
            out["radiative_rate_0_per_s"] = np.full(lev.bright_ev.shape, np.nan)
        else:   # (P, F, E) per pair -> the lowest bright pair's
            sel = rate[pick, np.arange(pick.shape[1])[None, :, None], np.arange(pick.shape[2])[None, None, :]] \
                if len(rate) else np.full(pick.shape, np.nan)
            out["radiative_rate_0_per_s"] = np.where(found, sel, np.nan)
        # the optical gaps: the lowest bright exciton's energy where positive (layers.optical_gap_of_exciton_ev:
        # a binding that reaches the pair's direct gap gives none); the exciton energies stay as computed
        if compensated is None:
            out["optical_gap_compensated_ev"] = layer_model.optical_gap_of_exciton_ev(lev.bright_ev)
        else:
            sel = compensated[pick, np.arange(pick.shape[1])[None, :, None]] if len(compensated) else \
                np.full(pick.shape, np.nan)
            out["optical_gap_compensated_ev"] = layer_model.optical_gap_of_exciton_ev(np.where(found, sel, np.nan))
        out["emission_compensated_nm"] = layer_model.emission_wavelength_nm(out["optical_gap_compensated_ev"])
        for key, idx in (("bright", lev.bright_pair), ("dark", lev.dark_pair)):
            weight = excitons.state_weight(deg[np.maximum(idx, 0)], total[key], dimension) if len(c) else np.nan
            out[f"{key}_weight"] = np.where(idx >= 0, weight, np.nan)
            out[f"{key}_pair_index"] = idx
        out["bright_exciton_ev"], out["dark_exciton_ev"] = lev.bright_ev, lev.dark_ev
        out["exciton_margin_ev"], out["brightness"] = lev.margin_ev, lev.verdict
        if wanted & {"optical_gap_ev", "emission_nm"}:
            out["optical_gap_ev"] = layer_model.optical_gap_of_exciton_ev(lev.bright_ev)
        if "emission_nm" in wanted:
            out["emission_nm"] = layer_model.emission_wavelength_nm(out["optical_gap_ev"])

    if settings.stack & _EXCITON_TRIGGERS:
        _stack_excitons(inputs, settings, table, r0_1, result.stack, pr, gaps, mu, fill)
    if settings.bulk & _EXCITON_TRIGGERS:
        eps_bulk = np.asarray(inputs.eps_bulk, dtype=float)[c]
        eb_b = hydrogenic.binding_3d_ev(mu, eps_bulk)
        perp = np.asarray(inputs.mass_perp_me, dtype=float)
        mperp = masses.reduced_mass_perpendicular(perp[pr.conduction], perp[pr.valence])
        has = np.isfinite(mperp) & np.isfinite(mu)
        if has.any():
            eb_b[has] = hydrogenic.binding_3d_anisotropic(
                mu[has], mperp[has], np.asarray(inputs.eps_parallel, dtype=float)[c][has],
                np.asarray(inputs.eps_perpendicular, dtype=float)[c][has]).binding_ev
        fill(result.bulk, settings.bulk, gaps[:, -1] - eb_b * f_bulk[c], 3)
    return pr


def _stack_excitons(inputs: ModelInputs, settings: ModelSettings, table, r0_1, out: dict, pr, gaps, mu, fill):
    """The stack's exciton level (:func:`_exciton_level`): Rytova-Keldysh binding of every pair in the
    surroundings resolved in full (``ModelSettings.exciton_environments``), of the bright pairs in the others."""
    n = inputs.n_compounds
    c = pr.compound
    f_lay = np.broadcast_to(np.asarray(inputs.binding_factor_layers, dtype=float), (n,))
    kappa = np.asarray(inputs.kappa, dtype=float)
    lay = np.asarray(inputs.layers)
    nl = lay[:-1].astype(float)
    scale = nl if settings.few_layer_r0_scaling else np.ones_like(nl)
    envs = np.arange(kappa.size)
    full = envs if settings.exciton_environments is None else np.unique(np.asarray(settings.exciton_environments,
                                                                                   dtype=np.int64))
    part = np.setdiff1d(envs, full)
    r0 = r0_1[c][:, None, None] * scale[None, :, None]   # (P, F, 1): the arrays broadcast to shape in the call
    eb = keldysh.keldysh_binding_ev(mu[:, None, None], r0, kappa[full][None, None, :], table, state="1s") \
        * f_lay[c][:, None, None]                           # (P, F, len(full))
    # the bright pairs' bindings in every surroundings (a bright pair's exciton gives the optical gap)
    bp = np.flatnonzero(pr.bright)
    eb_bright = np.empty((bp.size, nl.size, kappa.size))
    eb_bright[:, :, full] = eb[bp]
    if part.size:
        eb_bright[:, :, part] = keldysh.keldysh_binding_ev(mu[bp][:, None, None], r0[bp], kappa[part][None, None, :],
                                                          table, state="1s") * f_lay[c[bp]][:, None, None]
    # Full compensation: the quasiparticle gap shrinks with the surroundings' screening exactly as the
    # binding falls, so the bright exciton stays where it is in the surroundings the edges belong to.
    # Where those surroundings are configured ones (suspended, as a rule) their binding is eb's, the
    # same function of the same numbers; only the others are looked up again. Only the lowest bright
    # pair's compensated gap is read, so it is computed for the bright pairs.
    kap_ref = np.broadcast_to(np.asarray(inputs.edge_kappa, dtype=float), (n,))[c[bp]]
    same = kap_ref[:, None] == kappa[None, :]
    eb_ref = eb_bright[np.arange(bp.size), :, np.argmax(same, axis=1)] if kappa.size \
        else np.empty((bp.size, nl.size))
    other = ~same.any(axis=1)
    if other.any():
        eb_ref[other] = keldysh.keldysh_binding_ev(
            np.broadcast_to(mu[bp][other][:, None], (int(other.sum()), nl.size)), r0[bp][other][:, :, 0],
            np.broadcast_to(kap_ref[other][:, None], (int(other.sum()), nl.size)), table, state="1s") \
            * f_lay[c[bp]][other][:, None]
    compensated = np.full((len(c), nl.size), np.nan)
    compensated[bp] = gaps[bp, :-1] - eb_ref
    rate = None
    if settings.stack & {"radiative_rate_0_per_s"}:
        # Radiative-rate proxy of every pair's exciton (lamellume.brightness): Kane energy of the
        # pair's gap and reduced mass, |phi(0)|^2 from the Rytova-Keldysh rms radius, index sqrt(kappa).
        radius = keldysh.keldysh_radius_angstrom(mu[:, None, None], r0, kappa[full][None, None, :], table, state="1s")
        with np.errstate(invalid="ignore", divide="ignore"):
            rate = brightness.intrinsic_rate_per_s(
                brightness.kane_energy_ev(gaps[:, :-1, None], mu[:, None, None]), gaps[:, :-1, None] - eb,
                brightness.origin_density_2d_per_angstrom2(brightness.decay_length_from_rms_angstrom(radius)),
                np.sqrt(kappa[full])[None, None, :])
    if not part.size:
        fill(out, settings.stack, gaps[:, :-1, None] - eb, 2, compensated, rate)
        return
    resolved: dict[str, np.ndarray] = {}
    fill(resolved, settings.stack, gaps[:, :-1, None] - eb, 2, compensated, rate)
    for key, value in resolved.items():
        out[key] = np.empty((n, nl.size, kappa.size), dtype=value.dtype)
        out[key].fill(_NOT_RESOLVED.get(key, np.nan))   # (np.full converts a word for every cell: slow)
        out[key][:, :, full] = value
    lev = excitons.lowest_excitons(c[bp], gaps[bp, :-1, None] - eb_bright[:, :, part], np.ones(bp.size, dtype=bool),
                                   n, dark=False)
    out["bright_exciton_ev"][:, :, part] = lev.bright_ev
    out["bright_pair_index"][:, :, part] = np.where(lev.bright_pair >= 0, bp[np.maximum(lev.bright_pair, 0)],
                                                    excitons.NO_PAIR) if bp.size else excitons.NO_PAIR
    if "optical_gap_ev" in out:
        out["optical_gap_ev"][:, :, part] = layer_model.optical_gap_of_exciton_ev(lev.bright_ev)
    if "emission_nm" in out:
        out["emission_nm"][:, :, part] = layer_model.emission_wavelength_nm(out["optical_gap_ev"][:, :, part])


#: Exciton-level values in the surroundings not resolved in full (ModelSettings.exciton_environments);
#: every other quantity is NaN there.
_NOT_RESOLVED = {"bright_pair_index": excitons.NO_PAIR, "dark_pair_index": excitons.NO_PAIR,
                 "brightness": excitons.VERDICTS[2]}


def _bulk(inputs: ModelInputs, settings: ModelSettings, gap, pairs) -> dict[str, np.ndarray]:
    """Bulk-crystal quantities per compound (the last layer column).

    The bulk row's binding, 2s/3s levels and radii come from one model,
    :func:`lamellume.hydrogenic.bulk_exciton` (uniaxial variational where the
    out-of-plane reduced mass is given, isotropic hydrogenic otherwise);
    ``radius_angstrom`` is its in-plane rms radius (the convention of the
    layers' Rytova-Keldysh radius) and ``mott_radius_angstrom`` the geometric
    mean of its decay lengths (the radius of the 3D Mott criterion).
    """
    want = settings.bulk.__contains__
    eps_bulk = np.asarray(inputs.eps_bulk, dtype=float)
    mu = pairs["bright"].mu_me[:, -1]
    # the bulk model's own error (binding_factor_bulk, 1 for the point estimate) on the 3D hydrogenic
    # binding too: it is the bulk binding the Monte Carlo reports (bulk_binding_ev_p16/_p50/_p84)
    out: dict[str, np.ndarray] = {"bulk_binding_ev": hydrogenic.binding_3d_ev(mu, eps_bulk)
                                  * inputs.binding_factor_bulk}
    if settings.bulk & _NEEDS_BULK_MODEL:
        mperp = pairs["bright"].mu_perp_me
        mperp = np.full(mu.shape, np.nan) if mperp is None else mperp[:, -1]
        bx = hydrogenic.bulk_exciton(mu, mperp, np.asarray(inputs.eps_parallel, dtype=float),
                                     np.asarray(inputs.eps_perpendicular, dtype=float))
        aniso = bx.model == "3d-anisotropic"
        out["bulk_binding_aniso_ev"] = np.where(aniso, bx.binding_1s_ev, np.nan)
        out["binding_ev"] = bx.binding_1s_ev * inputs.binding_factor_bulk
        out["binding_model"] = bx.model
        out["binding_2s_ev"], out["binding_3s_ev"] = bx.binding_2s_ev, bx.binding_3s_ev
        out["radius_angstrom"] = out["bulk_radius_angstrom"] = bx.rms_radius_inplane_angstrom
        out["mott_radius_angstrom"] = bx.mott_radius_angstrom
    if want("quasi2d_binding_ev"):
        out["quasi2d_binding_ev"] = hydrogenic.binding_2d_ev(mu, eps_bulk)
    if want("quasi2d_radius_angstrom"):
        out["quasi2d_radius_angstrom"] = hydrogenic.bohr_radius_2d_angstrom(mu, eps_bulk)
    if want("dark_binding_ev"):
        out["dark_binding_ev"] = np.where(gap.is_direct[:, -1], np.nan,
                                          hydrogenic.binding_3d_ev(pairs["dark"].mu_me[:, -1], eps_bulk))
    # optical_gap_ev and emission_nm: the lowest bright exciton's (_exciton_level)
    return out


def _stack(inputs: ModelInputs, settings: ModelSettings, table, gap, pairs, r0_1) -> dict[str, np.ndarray]:
    """Few-layer quantities per (compound, layer count, surroundings)."""
    want = settings.stack.__contains__
    lay = np.asarray(inputs.layers)
    kappa = np.asarray(inputs.kappa, dtype=float)
    nl = lay[:-1].astype(float)
    scale = nl if settings.few_layer_r0_scaling else np.ones_like(nl)
    shape = (inputs.n_compounds, nl.size, kappa.size)
    r0_c = r0_1[:, None, None] * scale[None, :, None]            # (n, F, 1)
    mu_c = pairs["bright"].mu_me[:, :-1, None]                    # (n, F, 1)
    r0 = np.broadcast_to(r0_c, shape)
    kap = np.broadcast_to(kappa[None, None, :], shape)
    mu = np.broadcast_to(mu_c, shape)
    out: dict[str, np.ndarray] = {}
    if want("r0_angstrom"):
        out["r0_angstrom"] = r0_c * np.ones((1, 1, kappa.size))
    if want("kappa"):
        out["kappa"] = kap
    if want("binding_ev"):
        # the compact arrays: they broadcast in the look-up's last operation
        out["binding_ev"] = keldysh.keldysh_binding_ev(mu_c, r0_c, kappa[None, None, :], table, state="1s") \
            * np.broadcast_to(np.asarray(inputs.binding_factor_layers, dtype=float), (inputs.n_compounds,))[:, None, None]
    for state in ("2s", "3s"):
        if want(f"binding_{state}_ev"):
            out[f"binding_{state}_ev"] = keldysh.keldysh_binding_ev(mu, r0, kap, table, state=state)
    if want("radius_angstrom"):
        out["radius_angstrom"] = keldysh.keldysh_radius_angstrom(mu, r0, kap, table, state="1s")
    if want("binding_2d_hydrogenic_ev"):
        h_eps = settings.hydrogenic_eps
        out["binding_2d_hydrogenic_ev"] = hydrogenic.binding_2d_ev(
            mu, np.asarray(inputs.eps_bulk, dtype=float)[:, None, None] if h_eps <= 0 else h_eps)
    if want("binding_olsen_ev"):
        out["binding_olsen_ev"] = keldysh.olsen_binding_ev(mu, r0, kap)
    if want("dark_binding_ev"):
        mu_dark = np.broadcast_to(pairs["dark"].mu_me[:, :-1, None], shape)
        eb_dark = keldysh.keldysh_binding_ev(mu_dark, r0, kap, table, state="1s")
        out["dark_binding_ev"] = np.where(np.broadcast_to(gap.is_direct[:, :-1, None], shape), np.nan, eb_dark)
    # optical_gap_ev and emission_nm: the lowest bright exciton's (_exciton_level)
    return out
