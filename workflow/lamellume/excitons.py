"""Exciton-level brightness: every valley pair's exciton, the lowest bright and dark one.

Pure numpy; no file I/O. The band-gap character of :mod:`lamellume.layers`
compares band gaps only. Which exciton the lab sees is decided one level up:
every valence x conduction valley pair of a compound carries its own exciton,
at energy ``pair gap - pair binding`` with the pair's own reduced mass. A
momentum-dark pair with heavy masses binds more strongly and can lie below
the bright exciton of a smaller direct gap. This module builds the pairs,
their gaps, masses and valley degeneracies, selects the lowest bright and the
lowest dark exciton per compound, gives the verdict and the thermal bright
fraction. The bindings themselves come from the binding models
(:mod:`lamellume.keldysh`, :mod:`lamellume.hydrogenic`); callers pass them in.

Data layout
-----------
Valleys as in :mod:`lamellume.layers`: ``owner`` (compound index, sorted
ascending), ``label_code`` (Brillouin-zone point), ``is_conduction``,
``edge_ev`` (n_valleys, n_layers). Optional per valley:

``spin_split_ev`` (n_valleys,)
    Spin splitting of the valley's edge, eV (>= 0; NaN = not given). The edge
    ``edge_ev`` is the sub-band nearest the gap; the other sub-band lies
    ``spin_split_ev`` further from the gap (higher for a conduction valley,
    lower for a valence valley).
``edge_spin`` (n_valleys,) int
    Spin of the sub-band at the edge along the layer normal: :data:`SPIN_UP`
    (+1), :data:`SPIN_DOWN` (-1) or :data:`SPIN_UNKNOWN` (0, not given); the
    split-off sub-band has the opposite spin.

Selection rules
---------------
A pair of sub-bands is *bright* when both sit at the same Brillouin-zone
label (momentum-direct) and their spins agree or either spin is unknown
(a photon does not flip the spin, to the accuracy of the dipole
approximation with weak spin mixing). Every other pair is dark: momentum-dark
(different labels) or spin-dark (same label, opposite spins). Without spin
data every same-label pair counts as bright; callers say so.

Valley degeneracy
-----------------
``degeneracy`` per valley is the number of symmetry-equivalent points of its
label in the Brillouin zone (hexagonal lattices: Gamma 1, K 2, M 3, Q 6).
A momentum-dark pair (labels a != b) has ``g_a g_b`` equivalent combinations;
a same-label pair counts its ``g`` momentum-direct combinations. Combinations
of two different equivalent points of one label (K and K') are momentum-dark
excitons degenerate with the bright one at this level of theory; they are
not counted, because exchange and intervalley scattering, which order them,
lie outside the model.

References
----------
Exciton energy below the pair gap and the selection rules: P. Y. Yu and
M. Cardona, *Fundamentals of Semiconductors*, 4th ed. (2010), secs. 6.3 and
6.4 (excitons, indirect transitions). Spin-dark excitons of layered
semiconductors from spin-split conduction sub-bands: e.g. G. Wang et al.,
Rev. Mod. Phys. 90, 021001 (2018) (from memory). Boltzmann occupation with
a density of states proportional to ``g M^(d/2)``: common practice (any
statistical mechanics text, e.g. F. Reif, *Fundamentals of Statistical and
Thermal Physics* (1965), ch. 7).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy import special

from lamellume import layers, masses
from lamellume.units import thermal_energy_ev

__all__ = [
    "SPIN_UP",
    "SPIN_DOWN",
    "SPIN_UNKNOWN",
    "NO_PAIR",
    "VERDICTS",
    "SubBands",
    "Pairs",
    "ExcitonLevels",
    "spin_subbands",
    "valley_pairs",
    "pair_gaps_ev",
    "pair_inverse_mass",
    "pair_total_mass_me",
    "pair_degeneracy",
    "lowest_excitons",
    "brightness_verdict",
    "state_weight",
    "thermal_bright_fraction",
    "binding_fraction_exceeds",
]

#: Spin of a sub-band along the layer normal (up, down, not given).
SPIN_UP: int = 1
SPIN_DOWN: int = -1
SPIN_UNKNOWN: int = 0
#: Pair index reported where a compound has no bright (or no dark) pair.
NO_PAIR: int = -1
#: Brightness verdicts: the lowest exciton is bright, is dark, or a competitor is missing.
VERDICTS: tuple[str, str, str] = ("bright", "dark", "unknown")


class SubBands(NamedTuple):
    """Spin sub-bands of the valleys; every field is (n_subbands,), sorted by valley."""

    #: index of the owning valley
    valley: np.ndarray
    #: offset from the valley edge away from the gap, eV (0 for the edge sub-band)
    offset_ev: np.ndarray
    #: SPIN_UP, SPIN_DOWN or SPIN_UNKNOWN
    spin: np.ndarray


def spin_subbands(n_valleys: int, spin_split_ev=None, edge_spin=None) -> SubBands:
    """Expand valleys into spin sub-bands.

    A valley with a finite ``spin_split_ev`` and a known ``edge_spin`` gives two
    sub-bands: the edge (offset 0, ``edge_spin``) and the split-off one (offset
    ``spin_split_ev``, opposite spin). Any other valley gives one sub-band at
    offset 0 with spin unknown.

    Parameters
    ----------
    n_valleys : int
        Number of valleys.
    spin_split_ev : array_like, shape (n_valleys,), optional
        Spin splitting in eV (>= 0; NaN = not given).
    edge_spin : array_like of int, shape (n_valleys,), optional
        Spin of the edge sub-band (+1, -1, or 0 = not given).

    Returns
    -------
    SubBands
        Sub-bands sorted by valley index (edge sub-band first).

    References
    ----------
    Common practice (spin-1/2 bands split by spin-orbit coupling).
    """
    split = np.full(n_valleys, np.nan) if spin_split_ev is None else np.asarray(spin_split_ev, dtype=float)
    spin = np.zeros(n_valleys, dtype=np.int64) if edge_spin is None else np.asarray(edge_spin, dtype=np.int64)
    if split.shape != (n_valleys,) or spin.shape != (n_valleys,):
        raise ValueError("spin_split_ev and edge_spin must have shape (n_valleys,)")
    if np.any(split < 0):
        raise ValueError("spin_split_ev must be >= 0 (the edge is the sub-band nearest the gap)")
    if np.any((spin < SPIN_DOWN) | (spin > SPIN_UP)):   # integers: outside {-1, 0, +1}
        raise ValueError("edge_spin must be +1, -1 or 0")
    two = np.isfinite(split) & (spin != SPIN_UNKNOWN)
    idx = np.arange(n_valleys)
    valley = np.concatenate([idx, idx[two]])
    offset = np.concatenate([np.zeros(n_valleys), split[two]])
    spins = np.concatenate([np.where(two, spin, SPIN_UNKNOWN), -spin[two]])
    order = np.argsort(valley, kind="stable")
    return SubBands(valley[order], offset[order], spins[order].astype(np.int64))


class Pairs(NamedTuple):
    """Valence x conduction sub-band pairs; every field is (n_pairs,), sorted by compound."""

    #: compound index
    compound: np.ndarray
    #: valley index of the valence (hole) side
    valence: np.ndarray
    #: valley index of the conduction (electron) side
    conduction: np.ndarray
    #: valence sub-band offset below the valley edge, eV (>= 0)
    valence_offset_ev: np.ndarray
    #: conduction sub-band offset above the valley edge, eV (>= 0)
    conduction_offset_ev: np.ndarray
    #: both valleys at the same Brillouin-zone label (momentum-direct)
    same_label: np.ndarray
    #: spins agree or either is unknown
    spin_allowed: np.ndarray
    #: same_label and spin_allowed: the pair's exciton couples to light
    bright: np.ndarray


def valley_pairs(owner, label_code, is_conduction, spin_split_ev=None, edge_spin=None) -> Pairs:
    """Every valence x conduction sub-band pair of every compound.

    Parameters
    ----------
    owner : array_like of int, shape (n_valleys,)
        Compound index of each valley (any order).
    label_code : array_like of int, shape (n_valleys,)
        Brillouin-zone point code of each valley.
    is_conduction : array_like of bool, shape (n_valleys,)
        True for conduction valleys.
    spin_split_ev, edge_spin : array_like, shape (n_valleys,), optional
        Spin sub-bands, see :func:`spin_subbands`.

    Returns
    -------
    Pairs
        One row per (valence sub-band, conduction sub-band) of one compound,
        sorted by compound, then valence valley, then conduction valley.

    References
    ----------
    Selection rules: Yu and Cardona (2010), secs. 6.3-6.4 (see module docstring).
    """
    owner = np.asarray(owner, dtype=np.int64)
    label = np.asarray(label_code, dtype=np.int64)
    cond = np.asarray(is_conduction, dtype=bool)
    n_v = owner.size
    if not (label.shape == cond.shape == (n_v,)):
        raise ValueError("owner, label_code and is_conduction must have the same length")
    sub = spin_subbands(n_v, spin_split_ev, edge_spin)
    s_owner = owner[sub.valley]
    s_cond = cond[sub.valley]
    vs = np.flatnonzero(~s_cond)
    cs = np.flatnonzero(s_cond)
    # by (compound, valley): one stable sort of a combined key gives lexsort's order, and fast, as the
    # sub-bands come sorted by valley and valleys mostly by compound
    vs = vs[np.argsort(s_owner[vs] * n_v + sub.valley[vs], kind="stable")]
    cs = cs[np.argsort(s_owner[cs] * n_v + sub.valley[cs], kind="stable")]
    n_comp = int(owner.max()) + 1 if n_v else 0
    n_c_per = np.bincount(s_owner[cs], minlength=n_comp)
    c_start = np.concatenate([[0], np.cumsum(n_c_per)[:-1]]) if n_comp else np.zeros(0, dtype=np.int64)
    reps = n_c_per[s_owner[vs]] if vs.size else np.zeros(0, dtype=np.int64)
    pv = np.repeat(vs, reps)
    first = np.repeat(np.cumsum(reps) - reps, reps)
    within = np.arange(pv.size) - first
    pc = cs[c_start[s_owner[pv]] + within] if pv.size else np.zeros(0, dtype=np.int64)
    vv, cv = sub.valley[pv], sub.valley[pc]
    same = label[vv] == label[cv]
    sv, sc = sub.spin[pv], sub.spin[pc]
    allowed = (sv == SPIN_UNKNOWN) | (sc == SPIN_UNKNOWN) | (sv == sc)
    fields = (owner[vv], vv, cv, sub.offset_ev[pv], sub.offset_ev[pc], same, allowed, same & allowed)
    if np.all(fields[0][1:] >= fields[0][:-1]):   # already by compound (pairs follow the sorted valence list)
        return Pairs(*fields)
    order = np.argsort(owner[vv], kind="stable")
    return Pairs(*(np.asarray(f)[order] for f in fields))


def repeat_pairs(pairs: Pairs, valley_start, n_repeats: int) -> Pairs:
    """The pairs of :func:`valley_pairs` for every compound repeated ``n_repeats`` times.

    For valleys listed compound by compound (``valley_start``: offsets, shape
    (n_compounds + 1,)), repeating each compound's valleys ``n_repeats`` times
    in a row (compound c, repeat r -> compound ``c * n_repeats + r``, its
    valleys in the same order) gives arrays whose :func:`valley_pairs` are
    these: the same rows in the same order, without building them again. The
    Monte Carlo's samples of a record are such repeats.

    Parameters
    ----------
    pairs : Pairs
        :func:`valley_pairs` of the compounds (sorted by compound).
    valley_start : array_like of int, shape (n_compounds + 1,)
        First valley of each compound, and the number of valleys last.
    n_repeats : int

    Returns
    -------
    Pairs
    """
    start = np.asarray(valley_start, dtype=np.int64)
    n = start.size - 1
    k = np.diff(start)                                  # valleys per compound
    per = np.bincount(pairs.compound, minlength=n)      # pairs per compound
    first_pair = np.cumsum(per) - per
    # one cell per (compound c, repeat r) holding c's pairs: repeats of per-cell numbers (no integer division)
    cell_c = np.repeat(np.arange(n), n_repeats)
    cell_r = np.tile(np.arange(n_repeats), n)
    per_cell = per[cell_c]
    src = np.repeat(first_pair[cell_c] - (np.cumsum(per_cell) - per_cell), per_cell) + np.arange(int(per_cell.sum()))
    r = np.repeat(cell_r, per_cell)
    # valley v of compound c -> v + shift
    shift = np.repeat(start[cell_c] * (n_repeats - 1) + cell_r * k[cell_c], per_cell)
    return Pairs(pairs.compound[src] * n_repeats + r, pairs.valence[src] + shift, pairs.conduction[src] + shift,
                 *(np.asarray(f)[src] for f in pairs[3:]))


def pair_gaps_ev(pairs: Pairs, edge_ev, scissor_ev=None):
    """Pair gap ``E_c + scissor + offset_c - (E_v - offset_v)`` in eV.

    Parameters
    ----------
    pairs : Pairs
    edge_ev : array_like, shape (n_valleys, n_layers) or (n_valleys,)
        Valley edges in eV (NaN where absent).
    scissor_ev : array_like, shape (n_compounds,), optional
        Rigid shift added to every conduction edge of a compound (default 0).

    Returns
    -------
    numpy.ndarray, shape (n_pairs, n_layers) (or (n_pairs,))
        Pair gaps in eV; NaN where an edge is absent.

    References
    ----------
    Common practice (scissor correction of conduction edges).
    """
    e = np.asarray(edge_ev, dtype=float)
    shift = np.zeros(pairs.compound.shape) if scissor_ev is None else \
        np.asarray(scissor_ev, dtype=float)[pairs.compound]
    extra = shift + pairs.conduction_offset_ev + pairs.valence_offset_ev
    # np.take along the first axis: the rows of fancy indexing, faster for rows of several numbers
    return np.take(e, pairs.conduction, axis=0) - np.take(e, pairs.valence, axis=0) \
        + extra.reshape(extra.shape + (1,) * (e.ndim - 1))


def pair_inverse_mass(pairs: Pairs, inverse_mass):
    """Reduced inverse-mass tensor ``W_e + W_h`` of each pair, 1/m_e.

    Parameters
    ----------
    pairs : Pairs
    inverse_mass : array_like, shape (n_valleys, 2, 2)
        In-plane inverse-mass tensor of each valley (carrier sign, 1/m_e).

    Returns
    -------
    numpy.ndarray, shape (n_pairs, 2, 2)

    References
    ----------
    Ashcroft and Mermin, *Solid State Physics* (1976), ch. 12 (reduced mass).
    """
    w = np.asarray(inverse_mass, dtype=float)
    return np.take(w, pairs.conduction, axis=0) + np.take(w, pairs.valence, axis=0)


def pair_total_mass_me(pairs: Pairs, inverse_mass, index=None):
    """In-plane centre-of-mass (translational) density-of-states mass of each pair, m_e.

    The exciton's centre of mass moves with the mass tensor ``M = W_e^-1 +
    W_h^-1``; its 2D density of states is proportional to ``sqrt(det M)``,
    which is returned (for isotropic bands simply ``m_e + m_h``).

    Parameters
    ----------
    pairs : Pairs
    inverse_mass : array_like, shape (n_valleys, 2, 2)
        In-plane inverse-mass tensors, 1/m_e.
    index : array_like of int, optional
        Only these pairs (any shape; the result takes it): the model needs
        the mass of the few pairs it selects, not of every pair.

    Returns
    -------
    numpy.ndarray, shape (n_pairs,) (or that of ``index``)
        ``sqrt(det(M_e + M_h))`` in m_e; NaN where a tensor is missing.

    References
    ----------
    Yu and Cardona (2010), sec. 6.3 (exciton centre-of-mass motion); density
    of states of an anisotropic parabolic band: common practice.
    """
    w = np.asarray(inverse_mass, dtype=float)
    cond, val = np.asarray(pairs.conduction), np.asarray(pairs.valence)
    if index is not None:   # the distinct pairs asked for, computed once each, then spread to index's shape
        index = np.asarray(index)
        need = np.zeros(cond.shape, dtype=bool)
        need[index] = True
        sel = np.flatnonzero(need)
        at = np.empty(cond.shape, dtype=np.intp)
        at[sel] = np.arange(sel.size)
        cond, val = cond[sel], val[sel]
    # each valley's mass tensor is inverted where a pair needs it (the same numbers as inverting all first)
    total = _mass_tensor(np.take(w, cond, axis=0)) + _mass_tensor(np.take(w, val, axis=0))
    det = total[:, 0, 0] * total[:, 1, 1] - total[:, 0, 1] * total[:, 1, 0]
    with np.errstate(invalid="ignore"):
        mass = np.sqrt(det)
    return mass if index is None else mass[at[index]]


def _mass_tensor(w):
    """Mass tensors (k, 2, 2) of inverse-mass tensors ``w``, m_e; NaN where a tensor is not finite."""
    m = np.full(w.shape, np.nan)
    good = masses.finite_tensor(w)
    if good.all():
        good = slice(None)
    if w[good].size:  # 2x2 inverse written out (numpy.linalg.inv costs ~10x as much for many tiny matrices)
        wg = w[good]
        a, b, c, d = wg[:, 0, 0], wg[:, 0, 1], wg[:, 1, 0], wg[:, 1, 1]
        with np.errstate(divide="ignore", invalid="ignore"):
            inv_det = 1.0 / (a * d - b * c)
        m[good, 0, 0], m[good, 0, 1] = d * inv_det, -b * inv_det
        m[good, 1, 0], m[good, 1, 1] = -c * inv_det, a * inv_det
    return m


def pair_degeneracy(pairs: Pairs, degeneracy):
    """Number of equivalent valley combinations of each pair (see module docstring).

    Parameters
    ----------
    pairs : Pairs
    degeneracy : array_like of int, shape (n_valleys,)
        Symmetry-equivalent points of each valley's label in the Brillouin zone.

    Returns
    -------
    numpy.ndarray of float, shape (n_pairs,)
        ``g`` for a same-label pair (its momentum-direct combinations),
        ``g_v g_c`` for a pair of different labels.

    References
    ----------
    Common practice.
    """
    g = np.asarray(degeneracy, dtype=float)
    gv, gc = g[pairs.valence], g[pairs.conduction]
    return np.where(pairs.same_label, np.minimum(gv, gc), gv * gc)


class ExcitonLevels(NamedTuple):
    """Result of :func:`lowest_excitons`; fields are (n_compounds, ...)."""

    #: energy of the lowest bright exciton, eV (NaN if none)
    bright_ev: np.ndarray
    #: its pair index (NO_PAIR if none)
    bright_pair: np.ndarray
    #: energy of the lowest dark exciton, eV (NaN if none)
    dark_ev: np.ndarray
    #: its pair index (NO_PAIR if none)
    dark_pair: np.ndarray
    #: dark - bright, eV (> 0: the lowest exciton is bright); NaN if either is missing
    margin_ev: np.ndarray
    #: "bright", "dark" or "unknown" (see :func:`brightness_verdict`)
    verdict: np.ndarray


def _runs(compound):
    """:func:`lamellume.layers.segments` of the runs of equal compounds when ``compound`` is sorted, else None."""
    if not np.all(compound[1:] >= compound[:-1]):
        return None
    return layers.segments(np.flatnonzero(np.concatenate([[True], compound[1:] != compound[:-1]])), len(compound))


def _segment_min(values, compound, n_compounds, runs=False):
    """Per compound: minimum of ``values`` over its pairs and the first pair (smallest row) attaining it.

    ``runs``: :func:`_runs` of ``compound`` when the caller has it (False: found here).
    """
    shape = (n_compounds,) + values.shape[1:]
    best = np.full(shape, np.inf)
    if values.shape[0] == 0:
        return best, np.full(shape, NO_PAIR, dtype=np.int64)
    if runs is False:
        runs = _runs(compound)
    if runs is not None:
        # pairs sorted by compound (as valley_pairs makes them): the k-th pair of every compound at once,
        # several times faster than reduceat or the unbuffered ufunc.at scatter; the same minima and first rows
        seg = compound[runs.start]
        rows = slice(None) if seg.size == n_compounds else seg   # seg is sorted and unique
        seg_best, offset = layers.segment_argmin(values, runs)
        best[rows] = seg_best
        first = np.full(shape, NO_PAIR, dtype=np.int64)
        first[rows] = runs.start.reshape((-1,) + (1,) * (values.ndim - 1)) + offset
    else:
        big = np.iinfo(np.int64).max
        index = np.arange(values.shape[0]).reshape((-1,) + (1,) * (values.ndim - 1))
        np.minimum.at(best, compound, values)
        hit = np.isfinite(values) & (values == best[compound])
        first = np.full(shape, big, dtype=np.int64)
        np.minimum.at(first, compound, np.where(hit, index, big))
    return best, np.where(np.isfinite(best), first, NO_PAIR)


def lowest_excitons(compound, exciton_ev, bright, n_compounds: int, dark: bool = True) -> ExcitonLevels:
    """Lowest bright and lowest dark exciton of every compound.

    Parameters
    ----------
    compound : array_like of int, shape (n_pairs,)
        Compound index of each pair.
    exciton_ev : array_like, shape (n_pairs, ...)
        Exciton energy of each pair (pair gap - pair binding), eV, with any
        trailing axes (layer counts, surroundings); NaN = not available.
    bright : array_like of bool, shape (n_pairs,)
        Whether each pair's exciton is bright (:attr:`Pairs.bright`).
    n_compounds : int
    dark : bool, optional
        Also search the dark pairs (default). False: only the lowest bright
        exciton; the dark fields are then those of a compound without a dark
        pair (NaN energies, NO_PAIR, verdict "unknown").

    Returns
    -------
    ExcitonLevels
        Fields of shape (n_compounds, ...). Ties resolve to the smallest pair index.

    References
    ----------
    Yu and Cardona (2010), sec. 6.3 (see module docstring).
    """
    comp = np.asarray(compound, dtype=np.int64)
    e = np.asarray(exciton_ev, dtype=float)
    b = np.asarray(bright, dtype=bool).reshape((-1,) + (1,) * (e.ndim - 1))
    e_ok = np.where(np.isfinite(e), e, np.inf)
    runs = _runs(comp) if comp.size else None   # once for the bright and the dark search
    eb, ib = _segment_min(np.where(b, e_ok, np.inf), comp, n_compounds, runs)
    eb = np.where(np.isfinite(eb), eb, np.nan)
    if dark:
        ed, idk = _segment_min(np.where(~b, e_ok, np.inf), comp, n_compounds, runs)
        ed = np.where(np.isfinite(ed), ed, np.nan)
    else:   # brightness_verdict without a dark exciton: "unknown" everywhere
        ed, idk = np.full(eb.shape, np.nan), np.full(eb.shape, NO_PAIR, dtype=np.int64)
        verdict = np.empty(eb.shape, dtype=object)
        verdict.fill(VERDICTS[2])
        return ExcitonLevels(eb, ib, ed, idk, ed - eb, verdict)
    return ExcitonLevels(eb, ib, ed, idk, ed - eb, brightness_verdict(eb, ed))


_VERDICTS = np.array(["unknown", "bright", "dark"], dtype=object)


def brightness_verdict(bright_ev, dark_ev):
    """Whether the lowest exciton is bright.

    * "bright": a bright and a dark exciton are both known and the bright one is
      not above the dark one;
    * "dark": a dark exciton is known and lies below the bright one, or no bright
      exciton exists;
    * "unknown": no dark competitor is given (only same-label, spin-allowed
      pairs), or nothing is known. Missing competitors never count as a pass.

    Parameters
    ----------
    bright_ev, dark_ev : array_like
        Lowest bright and dark exciton energies, eV (NaN = none).

    Returns
    -------
    numpy.ndarray of object
        "bright", "dark" or "unknown".

    References
    ----------
    Common practice.
    """
    b = np.asarray(bright_ev, dtype=float)
    d = np.asarray(dark_ev, dtype=float)
    has_b, has_d = np.isfinite(b), np.isfinite(d)
    with np.errstate(invalid="ignore"):
        dark = has_d & (~has_b | (d < b))
    # codes 0 unknown, 1 bright, 2 dark, then one look-up into the words (no string arrays in between)
    code = np.where(dark, 2, (has_b & has_d).astype(np.int8))
    return _VERDICTS[code.reshape(-1)].reshape(code.shape)


def state_weight(degeneracy, total_mass_me, dimension):
    """Boltzmann weight prefactor ``g M^(d/2)`` of an exciton band (without the exponential).

    The number of centre-of-mass states per energy of a parabolic exciton
    band in d dimensions is proportional to ``M^(d/2)`` (times ``E^(d/2 - 1)``,
    the same for every band), so the thermal population of a band at its
    minimum energy E is ``g M^(d/2) exp(-E/kT)`` up to a common factor.

    Parameters
    ----------
    degeneracy : array_like
        Valley degeneracy of the exciton (:func:`pair_degeneracy`).
    total_mass_me : array_like
        Centre-of-mass density-of-states mass, m_e.
    dimension : int or array_like
        2 for layers, 3 for the bulk crystal.

    Returns
    -------
    numpy.ndarray

    References
    ----------
    Reif (1965), ch. 7 (classical occupation of a parabolic band): common practice.
    """
    return np.asarray(degeneracy, dtype=float) * np.asarray(total_mass_me, dtype=float) ** (
        np.asarray(dimension, dtype=float) / 2.0)


def thermal_bright_fraction(bright_ev, dark_ev, weight_bright, weight_dark, temperature_k):
    """Boltzmann fraction of excitons in the bright state (two-level, lowest bright vs lowest dark).

    ``f = w_B e^{-E_B/kT} / (w_B e^{-E_B/kT} + w_D e^{-E_D/kT})``
    ``  = 1 / (1 + (w_D / w_B) exp(-(E_D - E_B)/kT))``,
    evaluated with the logistic function (no overflow at low T). At T = 0 the
    lower state takes everything (equal energies share by weight). Without a
    dark competitor (NaN dark energy) the fraction is NaN: unknown, not 1.

    Parameters
    ----------
    bright_ev, dark_ev : array_like
        Energies of the lowest bright and dark excitons, eV.
    weight_bright, weight_dark : array_like
        Weights ``g M^(d/2)`` (:func:`state_weight`).
    temperature_k : float or array_like
        Temperature, K (>= 0).

    Returns
    -------
    numpy.ndarray
        Fraction in [0, 1]; NaN where an input is missing.

    References
    ----------
    Boltzmann occupation: Reif (1965), ch. 7 (common practice).
    """
    eb = np.asarray(bright_ev, dtype=float)
    ed = np.asarray(dark_ev, dtype=float)
    wb = np.asarray(weight_bright, dtype=float)
    wd = np.asarray(weight_dark, dtype=float)
    kt = thermal_energy_ev(np.asarray(temperature_k, dtype=float))
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        x = (ed - eb) / kt + np.log(wb) - np.log(wd)   # ln(bright / dark population)
        delta = ed - eb
        x = np.where(kt > 0, x, np.where(delta > 0, np.inf, np.where(delta < 0, -np.inf, np.log(wb / wd))))
        f = special.expit(x)
    bad = ~(np.isfinite(eb) & np.isfinite(ed) & (wb > 0) & (wd > 0))
    return np.where(bad, np.nan, f)


def binding_fraction_exceeds(binding_ev, gap_ev, max_fraction):
    """Flag bindings above ``max_fraction`` of the gap: outside the effective-mass model's validity.

    A Wannier-Mott exciton is a weakly bound pair, ``E_b << E_gap``; a binding
    that is a large fraction of the gap means the continuum screening and
    parabolic-band picture of the binding models no longer holds.

    Parameters
    ----------
    binding_ev, gap_ev : array_like
        Binding energy and the pair's quasiparticle gap, eV.
    max_fraction : float
        Largest trusted ratio E_b / E_gap.

    Returns
    -------
    numpy.ndarray of bool
        True where ``E_b > max_fraction * E_gap`` (False where either is NaN).

    References
    ----------
    Knox, *Theory of Excitons* (1963), ch. 2 (validity of the effective-mass
    exciton): common practice.
    """
    eb = np.asarray(binding_ev, dtype=float)
    gap = np.asarray(gap_ev, dtype=float)
    with np.errstate(invalid="ignore"):
        return eb > max_fraction * gap
