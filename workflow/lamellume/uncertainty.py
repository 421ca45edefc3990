"""Monte Carlo propagation of input uncertainties through the exciton screen.

Pure numpy/pandas; no file I/O. Input: the normalised entry and valley tables
of one shard (:mod:`lamellume.ingest`, columns ``ENTRY_COLUMNS`` and
``valley_columns``), the config sections ``uncertainty``, ``survival``,
``ranking``, ``layers``, ``monolayer``, ``environments`` and the Rytova-Keldysh
table. Output: one row per entry with percentiles of the target-layer binding
energy, optical gap and emission wavelength, of the bulk 3D binding energy, and
the probabilities that the gap is direct at the target layer count and that
every ranking criterion is met (:data:`OUTPUT_COLUMNS`).

Uncertain inputs and their distributions
----------------------------------------
Given per record where present (``NaN`` = not given), else the config default:

* effective masses (``mass_rel_unc``, relative; default ``default_mass_rel``):
  one log-normal factor per valley with median 1 multiplies the valley's whole
  in-plane mass tensor (all principal values together, the orientation is
  kept); valleys are independent of each other;
* dielectric tensor (``eps_rel_unc``, relative; ``default_eps_rel``): one
  log-normal factor per entry with median 1 multiplies the whole electronic
  tensor, so eps_parallel, eps_perpendicular and sqrt(eps_par eps_perp) move
  together; the factor is truncated below at 1/lambda_min (lambda_min the
  smallest eigenvalue of the tensor) so every eigenvalue stays >= 1. The
  truncated normal is obtained from the standard normal draw by the exact
  inverse-CDF map, so no rejection loop is needed;
* screening length (``r0_rel_unc``, relative; ``default_r0_rel``): one
  log-normal factor per entry with median 1 multiplies r0 (> 0 always). When
  r0 is not given it is the bulk estimate d (eps_par - 1)/2 of the *sampled*
  eps_par, times this factor (the estimate is itself approximate);
* band edges (``edge_unc_ev``, absolute eV; ``default_edge_ev``): one normal
  shift per valley, the same for every layer count of that valley (a common
  choice: the dominant error of a first-principles edge is a level offset of
  the valley, not layer-to-layer noise). The layer fill of
  :func:`lamellume.layers.fill_edges` is exactly covariant under a common
  shift (``E(N) = E_bulk + A x(N)**p`` with ``A, p`` fitted to
  ``E(N) - E_bulk``), so the nominal fill is computed once and shifted per
  sample;
* scissor shift (``scissor_unc_ev``, absolute eV; ``default_scissor_ev`` only
  where a record applies a non-zero shift without an uncertainty): one normal
  shift per entry, added to every conduction edge.

A log-normal factor with relative standard uncertainty u has
``sigma_ln = sqrt(ln(1 + u**2))`` (:func:`lognormal_sigma`): its relative
standard deviation is exactly u and its median is 1, so the median of a
quantity monotonic in one input is its point estimate. Zero uncertainty gives
factors of exactly 1 and shifts of exactly 0: the point estimate of
:func:`lamellume.screen.screen_entries` is then reproduced bit for bit.

Model per sample: the exciton model itself
------------------------------------------
Each block of samples is one call of :func:`lamellume.model.evaluate` (the
function the nominal screen calls), with the entry x sample cells as its
compound axis, the layer counts ``[ranking.target_layers, bulk]`` and every
configured surroundings; it is asked only for the Rytova-Keldysh binding,
optical gap, emission and exciton levels at the target layer count and the bulk
3D hydrogenic binding. The criteria use the ranking surroundings
(``ranking.environment``); the emission of every surroundings is summarised as
``emission_nm_p16__<env>`` / ``emission_nm_p84__<env>`` (the cards' expected
ranges). The bound criterion uses the 2D Saha bound fraction at
``survival.pair_density_per_cm2``. E_b/kT at ``survival.temperature_k`` comes from
:func:`lamellume.survival.binding_over_kt`, and the four ranking criteria from
:func:`lamellume.ranking.criteria`, the function the ranking uses. Label ties
(direct gaps degenerate within 1e-9 eV) resolve to the lexically smallest
label of the entry (:func:`lamellume.model.label_codes`), so results never
depend on which other entries share the shard.

Determinism and memory
----------------------
Entry e draws from ``numpy.random.default_rng(SeedSequence([seed, h(e)]))``
with h the first 8 bytes (big-endian) of SHA-256 of its UTF-8 identifier
(:func:`entry_seed_sequence`): one (samples, 3 + 2 k) array of standard
normals (columns: eps, r0, scissor, k valley masses, k valley edges; valleys
in ``valley_index`` order), drawn in sample chunks that concatenate to the
same stream. Results therefore do not depend on shard composition, entry
order or chunking. Work proceeds in blocks of at most
:data:`BLOCK_CELLS` = 32,768 (entry x sample) cells: ``BLOCK_CELLS // samples``
entries with all their samples, or one entry in chunks of ``BLOCK_CELLS``
samples when ``samples > BLOCK_CELLS``. Each block is reshaped into the
compound axis (entry-major, then sample) so the vectorized layer and exciton
functions run on it unchanged; peak memory is set by the block, not by the
shard size or the sample count.

Percentiles use linear interpolation between order statistics (numpy's
default) over the finite samples; probabilities count a sample with a
missing value as failing.

References
----------
JCGM 101:2008, *Evaluation of measurement data - Supplement 1 to the GUM:
propagation of distributions using a Monte Carlo method* (the method, the
coverage interval from percentiles); JCGM 100:2008 (GUM), sec. 5.1 (first-order
law of propagation used by :func:`first_order_binding_rel_unc`). Log-normal
moments: N. L. Johnson, S. Kotz and N. Balakrishnan, *Continuous Univariate
Distributions*, vol. 1, 2nd ed. (1994), ch. 14. Inverse-CDF sampling of a
truncated distribution: L. Devroye, *Non-Uniform Random Variate Generation*
(1986), ch. 2.
"""

from __future__ import annotations

import dataclasses
import hashlib
from typing import Iterator, Mapping, NamedTuple

import numpy as np
import pandas as pd
from scipy import special

from lamellume import (brightness, dielectric, excitons, gapshift, keldysh, layers as layer_model, model, ranking,
                       screen, survival)

__all__ = [
    "BLOCK_CELLS",
    "PERCENTILES",
    "QUANTITIES",
    "OUTPUT_COLUMNS",
    "lognormal_sigma",
    "first_order_binding_rel_unc",
    "reduced_mass_rel_unc",
    "entry_seed_sequence",
    "row_percentiles",
    "propagate_samples",
    "propagate_uncertainty",
]

#: Largest number of (entry x sample) cells evaluated at once (memory bound). Half the former
#: 65,536: the block's arrays then stay nearer the processor's caches, and the Monte Carlo of a
#: shard took 15 % less CPU (median of 5 alternated runs, 640 records); results never depend on it.
BLOCK_CELLS: int = 32_768
#: Percentiles reported for every quantity (16/84 bracket a 68 % interval).
PERCENTILES: tuple[float, ...] = (16.0, 50.0, 84.0)
#: Per-sample quantities summarised by percentiles.
QUANTITIES: tuple[str, ...] = ("target_binding_ev", "target_optical_gap_ev", "target_emission_nm",
                               "bulk_binding_ev")
_PROBABILITIES = ("p_gap_direct", "p_meets_all", "p_pass_direct", "p_pass_margin", "p_pass_binding", "p_pass_window")


def _pcol(quantity: str, q: float) -> str:
    return f"{quantity}_p{int(q)}"


#: Percentiles of the emission at the target layer count reported for every surroundings.
ENV_PERCENTILES: tuple[float, ...] = (16.0, 84.0)


def env_emission_key(env: str) -> str:
    """Per-sample key of the target emission in one surroundings."""
    return f"emission_nm__{env}"


def env_emission_columns(env_names) -> list[str]:
    """``emission_nm_p16__<env>``, ``emission_nm_p84__<env>`` for every surroundings, in config order."""
    return [f"emission_nm_p{int(q)}__{env}" for env in env_names for q in ENV_PERCENTILES]


def output_columns(settings: Mapping) -> list[str]:
    """Columns of :func:`propagate_uncertainty` for these settings: :data:`OUTPUT_COLUMNS` then the
    per-surroundings emission percentiles."""
    return OUTPUT_COLUMNS + env_emission_columns(settings["environments"])


#: Columns of the table returned by :func:`propagate_uncertainty`, in order.
OUTPUT_COLUMNS: list[str] = (["entry_id", "input_hash"]
                             + [_pcol(name, q) for name in QUANTITIES for q in PERCENTILES]
                             + list(_PROBABILITIES) + ["n_samples", "seed"])


# --------------------------------------------------------------------------- #
# Small pure helpers
# --------------------------------------------------------------------------- #
def lognormal_sigma(rel_unc):
    """Log-space width of a median-1 log-normal factor with relative std ``rel_unc``.

    Parameters
    ----------
    rel_unc : array_like
        Relative standard uncertainty u >= 0 (dimensionless).

    Returns
    -------
    numpy.ndarray
        ``sqrt(ln(1 + u**2))``; exactly 0 for u = 0, ~u for small u.

    References
    ----------
    Johnson, Kotz and Balakrishnan, *Continuous Univariate Distributions*,
    vol. 1 (1994), ch. 14 (coefficient of variation ``sqrt(exp(sigma^2) - 1)``).
    """
    u = np.asarray(rel_unc, dtype=float)
    return np.sqrt(np.log1p(u * u))


def first_order_binding_rel_unc(mu_rel_unc, eps_rel_unc, eps_power=2.0):
    """First-order relative uncertainty of a hydrogenic binding E ~ mu / eps**p.

    ``(sigma_E/E)**2 = (sigma_mu/mu)**2 + p**2 (sigma_eps/eps)**2`` for
    independent mu and eps (p = 2 for the 3D and strict-2D hydrogenic models;
    for Rytova-Keldysh in the 2D-hydrogen limit eps is the fixed kappa of the
    surroundings and only the mass term remains).

    Parameters
    ----------
    mu_rel_unc : array_like
        Relative standard uncertainty of the reduced mass.
    eps_rel_unc : array_like
        Relative standard uncertainty of the dielectric constant.
    eps_power : float, optional
        Power of eps in the denominator (default 2).

    Returns
    -------
    numpy.ndarray
        Relative standard uncertainty of the binding energy.

    References
    ----------
    JCGM 100:2008 (GUM), eq. (10) with sensitivity coefficients of a product
    of powers (sec. 5.1.6).
    """
    mu = np.asarray(mu_rel_unc, dtype=float)
    eps = np.asarray(eps_rel_unc, dtype=float)
    return np.sqrt(mu * mu + (eps_power * eps) ** 2)


def reduced_mass_rel_unc(m_electron_me, m_hole_me, rel_electron, rel_hole):
    """First-order relative uncertainty of mu = m_e m_h / (m_e + m_h).

    ``d ln mu = (mu/m_e) d ln m_e + (mu/m_h) d ln m_h`` for independent masses.

    Parameters
    ----------
    m_electron_me, m_hole_me : array_like
        Electron and hole masses in m_e.
    rel_electron, rel_hole : array_like
        Their relative standard uncertainties.

    Returns
    -------
    numpy.ndarray
        Relative standard uncertainty of the reduced mass.

    References
    ----------
    JCGM 100:2008 (GUM), eq. (10).
    """
    me = np.asarray(m_electron_me, dtype=float)
    mh = np.asarray(m_hole_me, dtype=float)
    mu = me * mh / (me + mh)
    return np.hypot(mu / me * np.asarray(rel_electron, dtype=float),
                    mu / mh * np.asarray(rel_hole, dtype=float))


def model_error_seed_sequence(seed: int, entry_id: str) -> np.random.SeedSequence:
    """Seed sequence of an entry's model-error draws: its own stream, so the input draws stay unchanged.

    ``SeedSequence([seed, sha256(id)[:8], 1])``: two standard normals per
    sample (Rytova-Keldysh, bulk), drawn in sample chunks that concatenate to
    the same stream.
    """
    digest = hashlib.sha256(str(entry_id).encode("utf-8")).digest()
    return np.random.SeedSequence([int(seed), int.from_bytes(digest[:8], "big"), 1])


def entry_seed_sequence(seed: int, entry_id: str) -> np.random.SeedSequence:
    """Seed sequence of one entry: ``SeedSequence([seed, sha256(id)[:8] as big-endian int])``.

    Stable across runs, machines and shard layouts.

    References
    ----------
    NumPy ``SeedSequence`` (entropy pooling of integer lists); common practice.
    """
    digest = hashlib.sha256(str(entry_id).encode("utf-8")).digest()
    return np.random.SeedSequence([int(seed), int.from_bytes(digest[:8], "big")])


def row_percentiles(values, q) -> np.ndarray:
    """Percentiles along the last axis, ignoring non-finite values (linear interpolation).

    Same definition as ``numpy.nanpercentile(..., method="linear")`` but fully
    vectorized; rows without a finite value give NaN.

    Parameters
    ----------
    values : array_like, shape (..., n)
    q : sequence of float
        Percentiles in [0, 100].

    Returns
    -------
    numpy.ndarray, shape (len(q), ...)

    References
    ----------
    R. J. Hyndman and Y. Fan, Am. Stat. 50, 361 (1996), definition 7.
    """
    v = np.asarray(values, dtype=float)
    v = np.sort(np.where(np.isfinite(v), v, np.nan), axis=-1)  # NaN sorts last
    n_f = np.sum(np.isfinite(v), axis=-1)
    out = np.full((len(q),) + v.shape[:-1], np.nan)
    has = n_f > 0
    last = np.maximum(n_f - 1, 0)
    for i, qq in enumerate(q):
        pos = float(qq) / 100.0 * last
        lo = np.floor(pos).astype(np.int64)
        hi = np.minimum(lo + 1, last)
        frac = pos - lo
        a = np.take_along_axis(v, lo[..., None], axis=-1)[..., 0]
        b = np.take_along_axis(v, hi[..., None], axis=-1)[..., 0]
        with np.errstate(invalid="ignore"):
            val = np.where(frac == 0.0, a, a + (b - a) * frac)
        out[i] = np.where(has, val, np.nan)
    return out


# --------------------------------------------------------------------------- #
# Preparation of the nominal inputs (once per shard)
# --------------------------------------------------------------------------- #
class _Prepared(NamedTuple):
    ids: np.ndarray
    input_hash: np.ndarray
    vstart: np.ndarray          # (n+1,) valley offsets per entry
    eps_par: np.ndarray
    eps_perp: np.ndarray
    eps_bulk: np.ndarray
    spacing: np.ndarray
    r0_given: np.ndarray
    scissor: np.ndarray
    sig_eps: np.ndarray         # log-normal width
    p_eps_lo: np.ndarray        # standard-normal CDF at the truncation point (0 = none)
    sig_r0: np.ndarray
    sig_scissor: np.ndarray     # eV
    code: np.ndarray            # (V,) label code, lexical within the entry
    is_cond: np.ndarray
    inv: np.ndarray             # (V, 2, 2)
    edges: np.ndarray           # (V, 2) filled edges at [target, bulk]
    sig_mass: np.ndarray
    sig_edge: np.ndarray        # eV
    layers: np.ndarray          # [target, bulk]
    kappa: np.ndarray           # (E,) every configured surroundings
    env_names: tuple            # (E,) their names
    env_index: int              # the ranking surroundings among them
    model_settings: model.ModelSettings
    temperature_k: float
    pair_density_per_cm2: float  # planned pair density of the bound-fraction criterion
    ranking: Mapping
    edge_kappa: np.ndarray      # (n,) mean constant of the surroundings the edges belong to
    degeneracy: np.ndarray      # (V,)
    spin_split: np.ndarray      # (V,) eV
    edge_spin: np.ndarray       # (V,) int
    sig_model_layers: float     # log-normal width of the Rytova-Keldysh model error
    sig_model_bulk: float       # log-normal width of the bulk 3D model error
    gap_thermal: gapshift.GapThermal  # (n,) arrays: each record's thermal gap form


#: What the Monte Carlo asks of the exciton model (lamellume.model.evaluate); the radiative-rate
#: proxy is not summarised by the Monte Carlo, so it is not computed per sample.
_STACK_WANTED = frozenset({"binding_ev", "optical_gap_ev", "emission_nm", *model.EXCITON_QUANTITIES}) \
    - {"radiative_rate_0_per_s"}
_BULK_WANTED = frozenset({"bulk_binding_ev"})


def _given_or(values, default) -> np.ndarray:
    v = np.asarray(values, dtype=float)
    return np.where(np.isfinite(v), v, float(default))


def _prepare(entries: pd.DataFrame, valleys: pd.DataFrame, settings: Mapping) -> _Prepared:
    unc = settings["uncertainty"]
    rk = settings["ranking"]
    max_layers = int(settings["layers"]["max_layers"])
    target = int(rk["target_layers"])
    if not 1 <= target <= max_layers:
        raise ValueError(f"ranking.target_layers = {target} is outside 1..layers.max_layers = {max_layers}")
    env_names = tuple(settings["environments"])
    kappa = screen.environment_kappa(settings)
    lay = screen.layer_counts(max_layers)

    entries = entries.reset_index(drop=True)
    n = len(entries)
    ids = entries["entry_id"].to_numpy(dtype=object)
    if pd.Index(ids).has_duplicates:
        raise ValueError("entry_id values must be unique within a shard")

    t = screen._tensor(entries, "eps_inf")
    eps = dielectric.layer_constants(t)
    finite_t = np.all(np.isfinite(t), axis=(1, 2))
    lam_min = np.full(n, np.nan)
    if finite_t.any():
        lam_min[finite_t] = np.linalg.eigvalsh(t[finite_t])[:, 0]
    sig_eps = lognormal_sigma(_given_or(entries["eps_rel_unc"], unc["default_eps_rel"]))
    with np.errstate(divide="ignore", invalid="ignore"):
        z_lo = np.where((sig_eps > 0) & (lam_min > 0), np.log(1.0 / lam_min) / sig_eps, -np.inf)
    p_eps_lo = special.ndtr(z_lo)

    scissor = entries["scissor_ev"].to_numpy(dtype=float)
    sc_unc = entries["scissor_unc_ev"].to_numpy(dtype=float)
    sc_default = np.where(scissor != 0.0, float(unc["default_scissor_ev"]), 0.0)
    sig_sc = np.where(np.isfinite(sc_unc), sc_unc, sc_default)

    vt, owner, code, raw = screen.valley_arrays(entries, valleys, lay)
    counts = np.bincount(owner, minlength=n) if len(owner) else np.zeros(n, dtype=np.int64)
    vstart = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    fill = layer_model.fill_edges(raw, lay, fit_exponent=bool(settings["layers"]["fit_exponent"]))
    edges = fill.filled_ev[:, [target - 1, len(lay) - 1]]

    return _Prepared(
        ids=ids, input_hash=entries["input_hash"].to_numpy(dtype=object), vstart=vstart,
        eps_par=np.asarray(eps.eps_parallel, dtype=float), eps_perp=np.asarray(eps.eps_perpendicular, dtype=float),
        eps_bulk=np.asarray(eps.eps_bulk_effective, dtype=float),
        spacing=entries["spacing_angstrom"].to_numpy(dtype=float),
        r0_given=entries["r0_given_angstrom"].to_numpy(dtype=float), scissor=scissor,
        sig_eps=sig_eps, p_eps_lo=p_eps_lo,
        sig_r0=lognormal_sigma(_given_or(entries["r0_rel_unc"], unc["default_r0_rel"])),
        sig_scissor=sig_sc, code=code, is_cond=(vt["band"] == "conduction").to_numpy(dtype=bool),
        inv=screen.inverse_mass(vt), edges=edges,
        sig_mass=lognormal_sigma(_given_or(vt["mass_rel_unc"], unc["default_mass_rel"])),
        sig_edge=_given_or(vt["edge_unc_ev"], unc["default_edge_ev"]),
        layers=np.array([target, layer_model.BULK]), kappa=np.asarray(kappa, dtype=float), env_names=env_names,
        env_index=env_names.index(rk["environment"]),
        model_settings=model.ModelSettings.from_config(settings, stack=_STACK_WANTED, bulk=_BULK_WANTED,
                                                       principal_masses=False, indirect_gap=False),
        temperature_k=float(settings["survival"]["temperature_k"]), ranking=rk,
        pair_density_per_cm2=float(settings["survival"]["pair_density_per_cm2"]),
        **dict(zip(("degeneracy", "spin_split", "edge_spin"), screen.exciton_inputs(vt).values())),
        edge_kappa=((entries["edge_eps_top"] + entries["edge_eps_bottom"]) / 2).fillna(1.0).to_numpy(dtype=float),
        sig_model_layers=float(lognormal_sigma(settings["excitons"]["model_rel_unc_layers"])),
        sig_model_bulk=float(lognormal_sigma(settings["excitons"]["model_rel_unc_bulk"])),
        gap_thermal=screen.gap_thermal(entries))


def _truncate_below(z, p_lo):
    """Map standard normals z to a standard normal truncated below at ndtri(p_lo) (exact inverse CDF).

    Rows with p_lo == 0 are returned unchanged. Both tails are mapped through
    the CDF on their own side, so no precision is lost for large |z|.
    """
    rows = np.flatnonzero(p_lo > 0.0)
    if not rows.size:
        return z
    out = z.copy()
    za = z[rows]
    pa = np.broadcast_to(p_lo[rows, None], za.shape)
    upper = za > 0
    res = np.empty_like(za)
    res[upper] = -special.ndtri((1.0 - pa[upper]) * special.ndtr(-za[upper]))
    res[~upper] = special.ndtri(pa[~upper] + (1.0 - pa[~upper]) * special.ndtr(za[~upper]))
    out[rows] = np.maximum(res, special.ndtri(p_lo[rows])[:, None])   # the truncation point, once per row
    return out


# --------------------------------------------------------------------------- #
# One block of (entry x sample) cells
# --------------------------------------------------------------------------- #
def _evaluate_block(prep: _Prepared, a: int, b: int, z_ent, z_mass, z_edge, table,
                    z_model=None) -> dict[str, np.ndarray]:
    """Per-sample results for entries a..b-1; z_ent (3, E, S), z_mass/z_edge (V_block, S).

    ``z_model`` (2, E, S): draws of the Rytova-Keldysh and bulk model errors
    (None: no model error).
    """
    n_e = b - a
    n_s = z_ent.shape[2]
    n_c = n_e * n_s
    k = np.diff(prep.vstart[a:b + 1])
    off = prep.vstart[a:b] - prep.vstart[a]
    v0 = prep.vstart[a]

    # valleys repeated per sample, ordered (entry, sample, valley): owner sorted ascending; each (entry,
    # sample) cell holds its entry's k valleys (repeats of per-cell numbers: no integer division)
    per_cell = np.repeat(k, n_s)
    owner = np.repeat(np.arange(n_c), per_cell)
    s = np.repeat(np.tile(np.arange(n_s), n_e), per_cell)
    p = np.repeat(np.repeat(off, n_s) - (np.cumsum(per_cell) - per_cell), per_cell) \
        + np.arange(owner.size)                       # valley index within the block
    gp = v0 + p                                       # valley index within the shard
    # np.take along the first axis: the rows fancy indexing would give, several times faster for
    # rows of more than one number
    cell = p * n_s + s                                # (valley, sample) in the draws' flat layout
    edges = np.take(prep.edges, gp, axis=0) + (prep.sig_edge[gp] * np.take(z_edge, cell))[:, None]
    f_mass = np.exp(prep.sig_mass[gp] * np.take(z_mass, cell))
    inv = np.take(prep.inv, gp, axis=0) / f_mass[:, None, None]        # mass x f  <=>  inverse mass / f
    code = prep.code[gp]
    cond = prep.is_cond[gp]
    # the valley pairs of the block's records, built once and repeated for every sample
    v1 = prep.vstart[b]
    pairs = excitons.repeat_pairs(excitons.valley_pairs(
        np.repeat(np.arange(n_e), k), prep.code[v0:v1], prep.is_cond[v0:v1], prep.spin_split[v0:v1],
        prep.edge_spin[v0:v1]), prep.vstart[a:b + 1] - v0, n_s)

    sl = slice(a, b)
    f_eps = np.exp(prep.sig_eps[sl, None] * _truncate_below(z_ent[0], prep.p_eps_lo[sl])).reshape(-1)
    f_r0 = np.exp(prep.sig_r0[sl, None] * z_ent[1]).reshape(-1)
    scissor = (prep.scissor[sl, None] + prep.sig_scissor[sl, None] * z_ent[2]).reshape(-1)
    rep = np.repeat(np.arange(a, b), n_s)
    if z_model is None:
        f_lay = f_bulk = 1.0
    else:
        f_lay = np.exp(prep.sig_model_layers * z_model[0]).reshape(-1)
        f_bulk = np.exp(prep.sig_model_bulk * z_model[1]).reshape(-1)
    res = model.evaluate(model.ModelInputs(
        layers=prep.layers, owner=owner, label_code=code, is_conduction=cond, edges_ev=edges, inv_mass=inv,
        mass_perp_me=np.full(len(code), np.nan), scissor_ev=scissor, eps_parallel=prep.eps_par[rep] * f_eps,
        eps_perpendicular=prep.eps_perp[rep] * f_eps, eps_bulk=prep.eps_bulk[rep] * f_eps,
        spacing_angstrom=prep.spacing[rep], r0_given_angstrom=prep.r0_given[rep], kappa=prep.kappa,
        r0_factor=f_r0, edge_kappa=prep.edge_kappa[rep], degeneracy=prep.degeneracy[gp], spin_split_ev=prep.spin_split[gp],
        edge_spin=prep.edge_spin[gp], binding_factor_layers=f_lay, binding_factor_bulk=f_bulk,
        gap_thermal=prep.gap_thermal.take(rep), temperature_k=prep.temperature_k, valley_pairs=pairs),
        # the exciton level in full where it is read below (the ranking surroundings); the optical gap and
        # emission, read in every surroundings, are the full model's everywhere
        dataclasses.replace(prep.model_settings, exciton_environments=(prep.env_index,)), table)
    gc = res.gap
    ei = prep.env_index
    eb = res.stack["binding_ev"][:, 0, ei]
    lam = res.stack["emission_nm"][:, 0, ei]
    st = {k: np.asarray(res.stack[k])[:, 0, ei] for k in model.EXCITON_QUANTITIES}
    with np.errstate(divide="ignore", invalid="ignore"):
        e_kt = survival.binding_over_kt(eb, prep.temperature_k)
    fraction = excitons.thermal_bright_fraction(st["bright_exciton_ev"], st["dark_exciton_ev"],
                                                st["bright_weight"], st["dark_weight"], prep.temperature_k)
    bound = survival.bound_fraction_2d(eb, res.pairs["bright"].mu_me[:, 0], prep.temperature_k,
                                       prep.pair_density_per_cm2)
    crit = ranking.criteria(st["brightness"], st["exciton_margin_ev"], e_kt, lam, fraction, prep.ranking,
                            st["emission_compensated_nm"], bound)
    out = {"target_binding_ev": eb, "target_optical_gap_ev": res.stack["optical_gap_ev"][:, 0, ei],
           "target_emission_nm": lam, "bulk_binding_ev": res.bulk["bulk_binding_ev"],
           "direct_target": gc.is_direct[:, 0] & gc.complete[:, 0], **crit,
           **{env_emission_key(name): res.stack["emission_nm"][:, 0, e] for e, name in enumerate(prep.env_names)}}
    if "radiative_rate_0_per_s" in prep.model_settings.stack:
        # the inputs of the score (ranking.score_parts), asked for by the attribution's shortlist
        # key (prepare_inputs(score_inputs=True)); the same functions as ranking.add_survival
        out["target_bound_fraction"] = bound
        out["target_exciton_margin_ev"] = st["exciton_margin_ev"]
        out["target_brightness_proxy_per_s"] = brightness.emitted_rate_per_s(
            st["radiative_rate_0_per_s"], st["bright_exciton_ev"], st["bright_mass_me"], prep.temperature_k,
            fraction, np.sqrt(prep.kappa[ei]))[1]
    return {key: np.asarray(v).reshape(n_e, n_s) for key, v in out.items()}


def _blocks(n: int, samples: int, block_cells: int) -> Iterator[tuple[int, int, int, int]]:
    if samples <= block_cells:
        step = max(1, block_cells // samples)
        for a in range(0, n, step):
            yield a, min(a + step, n), 0, samples
    else:
        for e in range(n):
            for s0 in range(0, samples, block_cells):
                yield e, e + 1, s0, min(s0 + block_cells, samples)


def _iter_entry_samples(prep: _Prepared, table, samples: int, seed: int,
                        block_cells: int) -> Iterator[tuple[int, int, dict[str, np.ndarray]]]:
    """Yield (a, b, per-sample arrays (b-a, samples)) for consecutive entry ranges."""
    n = len(prep.ids)
    gens: dict[int, tuple[np.random.Generator, np.random.Generator]] = {}
    pending: list[dict[str, np.ndarray]] = []
    for a, b, s0, s1 in _blocks(n, samples, block_cells):
        n_s, n_e = s1 - s0, b - a
        k = np.diff(prep.vstart[a:b + 1])
        width = 3 + 2 * k                                  # draws per sample: eps, r0, scissor, k masses, k edges
        at = np.concatenate([[0], np.cumsum(width * n_s)])  # each entry's (samples, width) draws, one after another
        z = np.empty(int(at[-1]))
        z_model = np.empty((n_e, n_s, 2))
        for i, e in enumerate(range(a, b)):
            if s0 == 0:
                gens[e] = (np.random.default_rng(entry_seed_sequence(seed, prep.ids[e])),
                           np.random.default_rng(model_error_seed_sequence(seed, prep.ids[e])))
            gen, model_gen = gens[e]
            gen.standard_normal(out=z[at[i]:at[i + 1]].reshape(n_s, width[i]))   # the stream of (n_s, width)
            model_gen.standard_normal(out=z_model[i])
            if s1 == samples:
                del gens[e]
        # the draws' columns gathered at once: first draw of every (entry, sample), then the columns
        first = at[:-1, None] + np.arange(n_s)[None, :] * width[:, None]          # (n_e, n_s)
        z_ent = np.stack([np.take(z, first + q) for q in range(3)])               # (3, n_e, n_s)
        owner = np.repeat(np.arange(n_e), k)
        column = 3 + np.arange(owner.size) - np.repeat(np.cumsum(k) - k, k)       # mass column of each valley
        mass_at = np.take(first, owner, axis=0) + column[:, None]                 # (V, n_s)
        z_mass = np.take(z, mass_at)
        z_edge = np.take(z, mass_at + k[owner][:, None])
        z_model = z_model.transpose(2, 0, 1)                                     # (2, n_e, n_s)
        res = _evaluate_block(prep, a, b, z_ent, z_mass, z_edge, table, z_model)
        if s0 == 0 and s1 == samples:
            yield a, b, res
            continue
        pending.append(res)
        if s1 == samples:
            yield a, b, {key: np.concatenate([r[key] for r in pending], axis=1) for key in res}
            pending = []


def _settings_samples_seed(settings: Mapping, samples: int | None, seed: int | None) -> tuple[int, int]:
    unc = settings["uncertainty"]
    return (int(unc["samples"]) if samples is None else int(samples),
            int(unc["seed"]) if seed is None else int(seed))


def propagate_samples(entries: pd.DataFrame, valleys: pd.DataFrame, settings: Mapping,
                      table: keldysh.KeldyshTable, samples: int | None = None, seed: int | None = None,
                      block_cells: int = BLOCK_CELLS) -> dict[str, np.ndarray]:
    """Every Monte Carlo sample of every entry (for checks and small shards).

    Parameters
    ----------
    entries, valleys : pandas.DataFrame
        Normalised shard tables (:data:`lamellume.ingest.ENTRY_COLUMNS`,
        :func:`lamellume.ingest.valley_columns`).
    settings : mapping
        Config sections uncertainty, survival, ranking, layers, monolayer,
        environments.
    table : lamellume.keldysh.KeldyshTable
    samples, seed : int, optional
        Override ``uncertainty.samples`` / ``uncertainty.seed``.
    block_cells : int, optional
        Memory bound (entry x sample cells per block); never changes results.

    Returns
    -------
    dict
        ``entry_id`` (n,) and, each of shape (n, samples): the
        :data:`QUANTITIES` (eV or nm), ``direct_target``, ``pass_direct``,
        ``pass_margin``, ``pass_binding``, ``pass_window``, ``meets_all``
        (bool). Memory grows with n x samples; use
        :func:`propagate_uncertainty` for large shards.

    References
    ----------
    JCGM 101:2008 (propagation of distributions by Monte Carlo).
    """
    samples, seed = _settings_samples_seed(settings, samples, seed)
    prep = _prepare(entries, valleys, settings)
    parts = list(_iter_entry_samples(prep, table, samples, seed, block_cells)) if samples > 0 else []
    out: dict[str, np.ndarray] = {"entry_id": prep.ids}
    keys = list(QUANTITIES) + ["direct_target", "pass_direct", "pass_margin", "pass_binding",
                               "pass_window", "meets_all"]
    for key in keys:
        dtype = float if key in QUANTITIES else bool
        out[key] = (np.concatenate([p[2][key] for p in parts], axis=0) if parts
                    else np.zeros((len(prep.ids), max(samples, 0)), dtype=dtype))
    return out


def propagate_uncertainty(entries: pd.DataFrame, valleys: pd.DataFrame, settings: Mapping,
                          table: keldysh.KeldyshTable, samples: int | None = None, seed: int | None = None,
                          block_cells: int = BLOCK_CELLS) -> pd.DataFrame:
    """Per-entry percentiles and probabilities from a Monte Carlo over the input uncertainties.

    Method, distributions, seeding and chunking: see the module docstring.

    Parameters
    ----------
    entries, valleys : pandas.DataFrame
        Normalised shard tables (:data:`lamellume.ingest.ENTRY_COLUMNS`,
        :func:`lamellume.ingest.valley_columns`), including the uncertainty
        columns ``eps_rel_unc``, ``r0_rel_unc``, ``scissor_unc_ev`` (entries)
        and ``mass_rel_unc``, ``edge_unc_ev`` (valleys); NaN = not given.
    settings : mapping
        Config sections uncertainty (samples, seed, default_mass_rel,
        default_eps_rel, default_edge_ev, default_r0_rel, default_scissor_ev),
        survival, ranking, layers, monolayer, environments.
    table : lamellume.keldysh.KeldyshTable
        Rytova-Keldysh table of the keldysh_table rule.
    samples, seed : int, optional
        Override ``uncertainty.samples`` / ``uncertainty.seed``.
    block_cells : int, optional
        At most this many (entry x sample) cells are evaluated at once
        (default :data:`BLOCK_CELLS`); it bounds memory and never changes results.

    Returns
    -------
    pandas.DataFrame
        One row per entry, sorted by entry_id, columns :data:`OUTPUT_COLUMNS`:
        ``entry_id``, ``input_hash``, ``<q>_p16``, ``<q>_p50``, ``<q>_p84`` for
        q in :data:`QUANTITIES` (eV or nm), ``p_gap_direct``,
        ``p_meets_all``, ``p_pass_margin``, ``p_pass_binding``,
        ``p_pass_window`` (fractions of samples), ``n_samples``, ``seed``.
        With ``samples = 0`` the rows are present with NaN values and
        ``n_samples = 0``.

    References
    ----------
    JCGM 101:2008, *Supplement 1 to the GUM* (Monte Carlo propagation,
    percentile coverage intervals).
    """
    samples, seed = _settings_samples_seed(settings, samples, seed)
    if samples < 0:
        raise ValueError("uncertainty.samples must be >= 0")
    if block_cells < 1:
        raise ValueError("block_cells must be >= 1")
    prep = _prepare(entries, valleys, settings)
    n = len(prep.ids)
    stats = {c: np.full(n, np.nan) for c in OUTPUT_COLUMNS[2:-2]}
    env_stats = {c: np.full(n, np.nan) for c in env_emission_columns(prep.env_names)}
    if samples > 0:
        for a, b, res in _iter_entry_samples(prep, table, samples, seed, block_cells):
            for name in QUANTITIES:
                pct = row_percentiles(res[name], PERCENTILES)
                for i, q in enumerate(PERCENTILES):
                    stats[_pcol(name, q)][a:b] = pct[i]
            stats["p_gap_direct"][a:b] = res["direct_target"].mean(axis=1)
            stats["p_meets_all"][a:b] = res["meets_all"].mean(axis=1)
            for key in ("pass_direct", "pass_margin", "pass_binding", "pass_window"):
                stats[f"p_{key}"][a:b] = res[key].mean(axis=1)
            for env in prep.env_names:
                pct = row_percentiles(res[env_emission_key(env)], ENV_PERCENTILES)
                for i, q in enumerate(ENV_PERCENTILES):
                    env_stats[f"emission_nm_p{int(q)}__{env}"][a:b] = pct[i]
    frame = pd.DataFrame({
        "entry_id": pd.Series(prep.ids, dtype=object),
        "input_hash": pd.Series(prep.input_hash, dtype=object),
        **{c: pd.Series(v, dtype="float64") for c, v in stats.items()},
        "n_samples": pd.Series(np.full(n, samples), dtype="int32"),
        "seed": pd.Series(np.full(n, seed), dtype="int64"),
        **{c: pd.Series(v, dtype="float64") for c, v in env_stats.items()},
    })
    return frame[OUTPUT_COLUMNS + list(env_stats)].sort_values("entry_id", kind="stable").reset_index(drop=True)


# --------------------------------------------------------------------------- #
# The per-sample model for other designs (variance-based attribution)
# --------------------------------------------------------------------------- #
def prepare_inputs(entries: pd.DataFrame, valleys: pd.DataFrame, settings: Mapping,
                   score_inputs: bool = False, ranking_environment_only: bool = False) -> _Prepared:
    """Nominal inputs and input widths of a shard, in the layout :func:`evaluate_draws` takes.

    Entries keep their order; valleys are ordered by (entry, valley_index).
    Standard-normal columns of one entry: eps, r0, scissor, then one mass and
    one edge column per valley (see the module docstring). With
    ``score_inputs`` the model also computes the radiative-rate proxy, and
    :func:`evaluate_draws` returns the inputs of the score as well. With
    ``ranking_environment_only`` the model is evaluated in the ranking
    surroundings alone (every criterion and target quantity is taken there;
    the per-surroundings emission outputs then cover only it).
    """
    prep = _prepare(entries, valleys, settings)
    if ranking_environment_only:
        ei = prep.env_index
        prep = prep._replace(kappa=prep.kappa[ei:ei + 1], env_names=prep.env_names[ei:ei + 1], env_index=0)
    if score_inputs:
        ms = prep.model_settings
        prep = prep._replace(model_settings=dataclasses.replace(ms, stack=ms.stack | {"radiative_rate_0_per_s"}))
    return prep


def evaluate_draws(prep: _Prepared, a: int, b: int, z_ent, z_mass, z_edge, table,
                   z_model=None) -> dict[str, np.ndarray]:
    """Per-sample model outputs of entries a..b-1 for given standard-normal draws.

    Parameters
    ----------
    prep : result of :func:`prepare_inputs`
    a, b : int
        Entry range (b exclusive).
    z_ent : numpy.ndarray, shape (3, b - a, S)
        Draws of the eps, r0 and scissor inputs.
    z_mass, z_edge : numpy.ndarray, shape (V, S)
        Draws of the valleys' mass and edge inputs (V valleys of the range).
    table : lamellume.keldysh.KeldyshTable
    z_model : numpy.ndarray, shape (2, b - a, S), optional
        Draws of the Rytova-Keldysh and bulk binding-model errors (None: the
        models are taken as exact).

    Returns
    -------
    dict of numpy.ndarray, shape (b - a, S)
        The :data:`QUANTITIES` (eV or nm), ``direct_target`` and the criteria
        of :func:`criteria` -- exactly what the propagation summarises. With
        ``prep`` from ``prepare_inputs(..., score_inputs=True)`` also the inputs
        of :func:`lamellume.ranking.score_parts` at the target layer count in
        the ranking surroundings: ``target_bound_fraction``,
        ``target_exciton_margin_ev`` (eV) and ``target_brightness_proxy_per_s``
        (1/s, :func:`lamellume.brightness.emitted_rate_per_s`).
    """
    return _evaluate_block(prep, a, b, z_ent, z_mass, z_edge, table, z_model)
