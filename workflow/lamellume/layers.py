"""Layer-resolved band-gap character, direct/indirect crossover and emission.

Pure numpy; no file I/O. Every function is vectorized over all valleys of all
compounds at once.

Data layout
-----------
layers : (n_layers,) int
    Layer counts, conventionally ``[1, 2, ..., N_max, BULK]``. ``BULK = 0`` is the
    sentinel for the bulk crystal (N -> infinity). Counts must be unique and
    non-negative; the order of the columns is free (functions that scan in
    thickness order sort internally: 1, 2, ..., N_max, then bulk).
owner : (n_valleys,) int
    Compound index 0..n_compounds-1 of each valley, sorted ascending (valleys of
    one compound contiguous). A compound may own no valley at all.
label_code : (n_valleys,) int
    Brillouin-zone point of the valley; two valleys of the same compound share a
    code iff they sit at the same point. Codes must be non-negative.
is_conduction : (n_valleys,) bool
    True for a conduction-band valley (minimum), False for a valence-band valley
    (maximum).
edge_ev : (n_valleys, n_layers) float
    Band-edge energy in eV; NaN where no value is available for that layer count.

Encodings (integer sentinels)
-----------------------------
``BULK = 0``           layer-count code of the bulk crystal (also used by
                       :func:`layer_crossover` for "switches only in bulk").
``NO_SWITCH = -1``     the band-gap character never changes (1..N_max and bulk).
``UNDETERMINED = -2``  the character could not be decided (missing valence or
                       conduction data before a decision was reached).
``NO_LABEL = -1``      label code reported where no extremum exists.

These codes stay inside the library: the tables carry the crossover as layer
counts that are empty where none exists and a state from a fixed list of words
(:func:`lamellume.screen.thinning_columns`, :data:`lamellume.tables.THINNING_STATES`).
"""

from __future__ import annotations

from typing import NamedTuple, Sequence

import numpy as np

from lamellume.units import HC_EV_NM

__all__ = [
    "BULK",
    "NO_SWITCH",
    "UNDETERMINED",
    "NO_LABEL",
    "DEGENERACY_TOL_EV",
    "EXPONENT_BOUNDS",
    "OUTSIDE_BAND",
    "EdgeFill",
    "GapCharacter",
    "Crossover",
    "Segments",
    "segments",
    "segment_reduce",
    "segment_argmin",
    "chain_confinement",
    "fill_edges",
    "gap_character",
    "layer_crossover",
    "optical_gap_ev",
    "optical_gap_of_exciton_ev",
    "emission_wavelength_nm",
    "spectral_band",
]

#: Layer-count sentinel for the bulk crystal (N -> infinity).
BULK: int = 0
#: ``character_switch_layers`` when the character never changes.
NO_SWITCH: int = -1
#: Crossover fields when the character cannot be decided from the data.
UNDETERMINED: int = -2
#: Label code reported where no valley attains an extremum.
NO_LABEL: int = -1
#: Energies closer than this (eV) are degenerate. A direct gap within this of the
#: lowest indirect gap counts as direct; degenerate extrema report the smallest
#: label code (or the direct label when the gap is direct).
DEGENERACY_TOL_EV: float = 1e-9
#: Bounds (inclusive) of the confinement exponent p when it is fitted.
EXPONENT_BOUNDS: tuple[float, float] = (0.25, 4.0)
#: Name returned by :func:`spectral_band` for wavelengths in no band.
OUTSIDE_BAND: str = "outside"

_EXPONENT_GRID = 49  # coarse log-spaced grid points over EXPONENT_BOUNDS
_GOLDEN_ITERATIONS = 45  # bracket (2 grid steps in log p) shrinks by 0.618**45 ~ 4e-10


# --------------------------------------------------------------------------- #
# 1. Confinement model
# --------------------------------------------------------------------------- #
def _check_layers(layers) -> np.ndarray:
    layers = np.asarray(layers)
    if layers.ndim != 1 or layers.size == 0:
        raise ValueError("layers must be a non-empty 1-D array of layer counts")
    if not np.issubdtype(layers.dtype, np.integer):
        if not np.all(np.equal(np.mod(layers, 1), 0)):
            raise ValueError("layers must be integers (0 = BULK)")
        layers = layers.astype(np.int64)
    if np.any(layers < 0):
        raise ValueError("layer counts must be >= 1, or BULK (0)")
    if np.unique(layers).size != layers.size:
        raise ValueError("layer counts must be unique")
    return layers


def chain_confinement(layers):
    """Confinement factor ``1 - cos(pi / (N + 1))`` of an N-layer stack.

    A stack of N identical layers coupled to nearest neighbours by a hopping t is
    an open N-site tight-binding chain; its lowest level is
    ``eps - 2 t cos(pi / (N + 1))``. With ``E_1 = eps`` (monolayer) and
    ``E_bulk = eps - 2 t`` (N -> infinity) the band edge is

        E(N) = E_bulk + (E_1 - E_bulk) * (1 - cos(pi / (N + 1))),

    and this function returns the factor multiplying ``E_1 - E_bulk``: 1 for the
    monolayer, 1/2 for the bilayer, tending to ``pi**2 / (2 N**2)`` for thick
    stacks and exactly 0 for ``BULK``.

    Parameters
    ----------
    layers : int or array_like of int
        Layer counts N >= 1, or ``BULK`` (0) for the bulk crystal.

    Returns
    -------
    numpy.ndarray of float
        Dimensionless factor in [0, 1], same shape as ``layers``.

    References
    ----------
    N. W. Ashcroft and N. D. Mermin, *Solid State Physics* (1976), ch. 10
    (tight-binding method); the open-chain spectrum ``eps - 2 t cos(k pi/(N+1))``,
    k = 1..N, is the standard eigenvalue set of a tridiagonal Toeplitz matrix.
    Using it for few-layer band edges is common practice.
    """
    n = np.asarray(layers)
    if np.any(n < 0):
        raise ValueError("layer counts must be >= 1, or BULK (0)")
    n_f = n.astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        factor = 1.0 - np.cos(np.pi / (n_f + 1.0))
    return np.where(n == BULK, 0.0, factor)


class EdgeFill(NamedTuple):
    """Result of :func:`fill_edges`; arrays are per valley."""

    #: (n_valleys, n_layers) eV: given values kept, missing ones from the model;
    #: whole row NaN where ``anchored`` is False.
    filled_ev: np.ndarray
    #: (n_valleys,) eV: RMS of model minus given value over the given finite-N
    #: points (the bulk point is exact by construction and not counted);
    #: 0 with only monolayer + bulk; NaN where not anchored.
    residual_ev: np.ndarray
    #: (n_valleys,) int: number of given (finite) layer counts, bulk included.
    n_given: np.ndarray
    #: (n_valleys,) bool: monolayer and bulk both given (required for a fit).
    anchored: np.ndarray
    #: (n_valleys,) eV: fitted amplitude A (``E_1 - E_bulk`` with two points).
    amplitude_ev: np.ndarray
    #: (n_valleys,) exponent p of ``A * chain_confinement(N)**p`` (1 unless fitted).
    exponent: np.ndarray


def _sse_for_exponent(p, x, y, mask):
    """Residual sum of squares and amplitude at exponent p (per row), A optimal."""
    xp = np.exp(p[:, None] * np.log(x)[None, :]) * mask
    sxy = np.sum(xp * y, axis=1)
    sxx = np.sum(xp * xp, axis=1)
    amp = np.divide(sxy, sxx, out=np.zeros_like(sxy), where=sxx > 0)
    resid = np.where(mask, amp[:, None] * xp - y, 0.0)
    return np.sum(resid * resid, axis=1), amp


def _fit_exponent(x, y, mask):
    """Bounded fit of p in y = A x**p (x in (0, 1]) for every row; A closed form.

    Coarse log-spaced grid over EXPONENT_BOUNDS (evaluated for all rows at once by
    matrix products), then golden-section search in log p inside the bracket of
    the best grid point. p = 1 is kept unless the fit lowers the sum of squares by
    more than a relative 1e-12.
    """
    lo, hi = np.log(EXPONENT_BOUNDS[0]), np.log(EXPONENT_BOUNDS[1])
    grid = np.linspace(lo, hi, _EXPONENT_GRID)
    # x**p for all grid p; masked columns contribute nothing.
    x_safe = np.where(x > 0, x, 1.0)
    xg = x_safe[:, None] ** np.exp(grid)[None, :]  # (n_layers, n_grid)
    my = np.where(mask, y, 0.0)
    m = mask.astype(float)
    sxy = my @ xg
    sxx = m @ (xg * xg)
    syy = np.sum(my * my, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        sse_grid = syy[:, None] - np.where(sxx > 0, sxy * sxy / sxx, 0.0)
    k = np.argmin(sse_grid, axis=1)
    a = grid[np.clip(k - 1, 0, grid.size - 1)]
    b = grid[np.clip(k + 1, 0, grid.size - 1)]
    golden = (np.sqrt(5.0) - 1.0) / 2.0
    c = b - golden * (b - a)
    d = a + golden * (b - a)
    fc, _ = _sse_for_exponent(np.exp(c), x_safe, y, mask)
    fd, _ = _sse_for_exponent(np.exp(d), x_safe, y, mask)
    for _ in range(_GOLDEN_ITERATIONS):
        left = fc < fd  # minimum bracketed by [a, d], else by [c, b]
        a, b = np.where(left, a, c), np.where(left, d, b)
        x_new = np.where(left, b - golden * (b - a), a + golden * (b - a))
        f_new, _ = _sse_for_exponent(np.exp(x_new), x_safe, y, mask)
        c, fc, d, fd = (np.where(left, x_new, d), np.where(left, f_new, fd),
                        np.where(left, c, x_new), np.where(left, fc, f_new))
    p_best = np.exp(0.5 * (a + b))
    sse_best, amp_best = _sse_for_exponent(p_best, x_safe, y, mask)
    sse_one, amp_one = _sse_for_exponent(np.ones_like(p_best), x_safe, y, mask)
    keep_one = (sse_one - sse_best) <= 1e-12 * syy + 1e-30
    return np.where(keep_one, 1.0, p_best), np.where(keep_one, amp_one, amp_best)


def fill_edges(edge_ev, layers, fit_exponent: bool = False) -> EdgeFill:
    """Complete band edges over layer count with the coupled-layer chain model.

    Model: ``E(N) = E_bulk + A * chain_confinement(N)**p`` with ``p = 1`` unless
    ``fit_exponent``. The bulk value is always the given one (fixed).

    * monolayer + bulk only: ``A = E_1 - E_bulk``, residual 0;
    * three or more given layer counts: ``A`` by linear least squares through the
      given finite-N points with E_bulk fixed (closed form
      ``A = sum(x y) / sum(x x)``, ``x = chain_confinement(N)``,
      ``y = E(N) - E_bulk``);
    * ``fit_exponent=True`` and at least two given finite-N points: ``(A, p)``
      minimise the same sum of squares, ``p`` bounded to :data:`EXPONENT_BOUNDS`
      (coarse log grid, then golden-section refinement; ``A`` closed form at each
      ``p``). ``p`` stays 1 unless that lowers the sum of squares by more than a
      relative 1e-12.

    Given values are returned unchanged; only missing entries come from the
    model. Monolayer and bulk must both be given: otherwise the valley's row is
    NaN and ``anchored`` is False.

    Parameters
    ----------
    edge_ev : array_like, shape (n_valleys, n_layers)
        Band-edge energies in eV, NaN where not given.
    layers : array_like of int, shape (n_layers,)
        Layer counts, ``BULK`` (0) for bulk; must contain 1 and ``BULK``.
    fit_exponent : bool, optional
        Also fit the exponent p (default False: p = 1, the chain model).

    Returns
    -------
    EdgeFill
        ``filled_ev`` (n_valleys, n_layers) eV, ``residual_ev`` (n_valleys,) eV,
        ``n_given`` (n_valleys,) int, ``anchored`` (n_valleys,) bool,
        ``amplitude_ev`` (n_valleys,) eV, ``exponent`` (n_valleys,).

    References
    ----------
    Open-chain tight-binding levels: N. W. Ashcroft and N. D. Mermin,
    *Solid State Physics* (1976), ch. 10. Fixed-endpoint linear least squares and
    golden-section search: W. H. Press et al., *Numerical Recipes*, 3rd ed.
    (2007), secs. 15.4 and 10.2. Applying the chain to layer-number band edges is
    common practice.
    """
    layers = _check_layers(layers)
    edge = np.asarray(edge_ev, dtype=float)
    if edge.ndim != 2 or edge.shape[1] != layers.size:
        raise ValueError("edge_ev must have shape (n_valleys, len(layers))")
    if not (np.any(layers == 1) and np.any(layers == BULK)):
        raise ValueError("layers must contain the monolayer (1) and BULK (0)")
    i_bulk = int(np.flatnonzero(layers == BULK)[0])
    i_mono = int(np.flatnonzero(layers == 1)[0])

    given = np.isfinite(edge)
    n_given = given.sum(axis=1)
    anchored = given[:, i_bulk] & given[:, i_mono]
    e_bulk = edge[:, i_bulk]

    x = chain_confinement(layers)  # (n_layers,), 0 at bulk
    fin = layers != BULK
    mask = given & fin[None, :] & anchored[:, None]
    y = np.where(mask, edge - e_bulk[:, None], 0.0)

    xm = np.where(mask, x[None, :], 0.0)
    sxx = np.sum(xm * xm, axis=1)
    sxy = np.sum(xm * y, axis=1)
    amp = np.divide(sxy, sxx, out=np.full_like(sxy, np.nan), where=sxx > 0)
    expo = np.ones_like(amp)

    if fit_exponent:
        rows = anchored & (mask.sum(axis=1) >= 2)
        if np.any(rows):
            p_fit, a_fit = _fit_exponent(x[fin], y[rows][:, fin], mask[rows][:, fin])
            expo[rows] = p_fit
            amp[rows] = a_fit

    with np.errstate(invalid="ignore"):
        shape = np.where(fin[None, :], x[None, :] ** expo[:, None], 0.0)
    model = e_bulk[:, None] + amp[:, None] * shape
    filled = np.where(given, edge, model)
    filled[~anchored] = np.nan

    resid = np.where(mask, model - edge, 0.0)
    n_fit = mask.sum(axis=1)
    residual = np.sqrt(np.divide(np.sum(resid * resid, axis=1), n_fit,
                                 out=np.zeros(edge.shape[0]), where=n_fit > 0))
    residual[~anchored] = np.nan
    amp[~anchored] = np.nan
    expo[~anchored] = np.nan
    return EdgeFill(filled, residual, n_given, anchored, amp, expo)


# --------------------------------------------------------------------------- #
# 2. Per-compound, per-layer gap character
# --------------------------------------------------------------------------- #
class GapCharacter(NamedTuple):
    """Result of :func:`gap_character`; every field is (n_compounds, n_layers)."""

    #: valence-band maximum, eV (NaN if no valence valley)
    vbm_ev: np.ndarray
    #: label code at the VBM (NO_LABEL if none)
    vbm_label: np.ndarray
    #: conduction-band minimum incl. scissor, eV (NaN if no conduction valley)
    cbm_ev: np.ndarray
    #: label code at the CBM (NO_LABEL if none)
    cbm_label: np.ndarray
    #: CBM - VBM, eV
    fundamental_gap_ev: np.ndarray
    #: direct character (bright); False where not ``complete``
    is_direct: np.ndarray
    #: min over labels in both bands of CBM(label) - VBM(label), eV (NaN if none)
    direct_gap_ev: np.ndarray
    #: label code of the lowest direct gap (NO_LABEL if none)
    direct_label: np.ndarray
    #: min over valence/conduction pairs at different labels, eV (NaN if none)
    indirect_gap_ev: np.ndarray
    #: indirect - direct, eV; +inf if no indirect pair, -inf if no direct pair
    direct_margin_ev: np.ndarray
    #: both a valence and a conduction edge exist at this layer count
    complete: np.ndarray


class Segments(NamedTuple):
    """Contiguous runs of rows (:func:`segments`), laid out for reductions over each run."""

    #: first row of each segment, ascending; every segment holds at least one row
    start: np.ndarray
    #: last row of each segment
    last: np.ndarray
    #: rows of the longest segment
    width: int
    #: every segment is ``width`` rows long
    equal: bool
    #: reduce position by position (False: a few segments far longer than the rest, where numpy's
    #: ``reduceat`` touches fewer rows)
    by_position: bool


#: Largest ratio of (segments x longest segment) to rows for the position-by-position reductions.
_POSITION_PASSES = 4


def segments(start, n_rows: int) -> Segments:
    """Layout of the segments of ``n_rows`` rows that begin at ``start`` (ascending, ``start[0] == 0``)."""
    start = np.asarray(start, dtype=np.int64)
    last = np.append(start[1:], n_rows) - 1
    length = last - start + 1
    width = int(length.max()) if length.size else 0
    return Segments(start, last, width, bool(np.all(length == width)),
                    width * start.size <= _POSITION_PASSES * n_rows)


def _segment_rows(layout: Segments, j: int) -> np.ndarray:
    """Row j of every segment; the last row of a shorter segment (a repeat: harmless to min, max, or)."""
    return layout.start + j if layout.equal else np.minimum(layout.start + j, layout.last)


def segment_reduce(ufunc, values, layout: Segments) -> np.ndarray:
    """``ufunc.reduceat(values, layout.start, axis=0)`` for an idempotent ufunc (minimum, maximum, logical_or).

    The same numbers, the rows taken in the same order: one call of the ufunc
    per row of the longest segment, on the j-th rows of every segment gathered
    (a shorter segment repeats its last row, which an idempotent ufunc
    ignores), several times faster than ``reduceat`` for many short segments
    with trailing axes.
    """
    if not layout.by_position:
        return ufunc.reduceat(values, layout.start, axis=0)
    out = np.take(values, layout.start, axis=0)
    for j in range(1, layout.width):
        ufunc(out, np.take(values, _segment_rows(layout, j), axis=0), out=out)
    return out


def segment_argmin(values, layout: Segments) -> tuple[np.ndarray, np.ndarray]:
    """Minimum of each segment (:func:`segment_reduce` of ``np.minimum``) and the offset of its first row
    attaining it, counted from the segment's start (meaningless where the minimum is NaN)."""
    if not layout.by_position:
        best = np.minimum.reduceat(values, layout.start, axis=0)
        n = len(values)
        row = np.arange(n).reshape((-1,) + (1,) * (np.ndim(values) - 1))
        length = np.diff(np.append(layout.start, n))
        at = np.where(values == np.repeat(best, length, axis=0), row, n)
        return best, np.minimum.reduceat(at, layout.start, axis=0) - layout.start.reshape((-1,) + row.shape[1:])
    best = np.take(values, layout.start, axis=0)
    offset = np.zeros(best.shape, dtype=np.int64)
    for j in range(1, layout.width):
        row = np.take(values, _segment_rows(layout, j), axis=0)
        np.copyto(offset, j, where=row < best)
        np.minimum(best, row, out=best)
    return best, offset


def _first_index(mask, layout: Segments, n_groups):
    """Index of the first True row of each compound segment (n_groups if none): the first row where
    ``~mask`` attains its minimum (:func:`segment_argmin`; False < True), where that minimum is False."""
    none, offset = segment_argmin(~np.asarray(mask, dtype=bool), layout)
    return np.where(none, n_groups, layout.start.reshape((-1,) + (1,) * (np.ndim(mask) - 1)) + offset)


def gap_character(owner, label_code, is_conduction, edge_ev, scissor_ev=None,
                  n_compounds: int | None = None, indirect: bool = True) -> GapCharacter:
    """Band-gap extrema and direct/indirect character per compound and layer count.

    Valleys are grouped by (compound, label); per group the highest valence and
    the lowest conduction edge are taken (reductions over contiguous segments
    after a lexsort, :func:`segment_reduce`), then per compound:

    * VBM, CBM and fundamental gap ``CBM - VBM``;
    * lowest direct gap ``min_l [C(l) - V(l)]`` over labels present in both bands;
    * lowest indirect gap ``min_{l != m} [C(m) - V(l)]``, from the best and
      second-best labels of each band;
    * ``direct_margin_ev = indirect - direct`` (> 0 bright, < 0 dark);
    * ``is_direct``: ``direct <= fundamental + DEGENERACY_TOL_EV``, i.e. a direct
      transition degenerate (within 1e-9 eV) with an indirect one counts as
      direct.

    Ties: among degenerate extrema (within :data:`DEGENERACY_TOL_EV`) the smallest
    label code is reported; when the gap is direct, ``vbm_label`` and
    ``cbm_label`` both equal ``direct_label``.

    Non-finite edges are treated as absent. A compound (layer count) lacking a
    valence or a conduction edge has NaN energies, NO_LABEL labels,
    ``is_direct = False`` and ``complete = False``.

    Parameters
    ----------
    owner : array_like of int, shape (n_valleys,)
        Compound index of each valley, sorted ascending.
    label_code : array_like of int, shape (n_valleys,)
        Brillouin-zone point code (>= 0) of each valley.
    is_conduction : array_like of bool, shape (n_valleys,)
        True for conduction valleys, False for valence valleys.
    edge_ev : array_like, shape (n_valleys, n_layers)
        Band edges in eV (e.g. ``fill_edges(...).filled_ev``).
    scissor_ev : float or array_like, shape (n_compounds,), optional
        Scissor shift in eV added to every conduction edge of the compound before
        anything else (default 0).
    n_compounds : int, optional
        Number of compounds (default ``owner.max() + 1``); compounds without
        valleys get NaN rows.
    indirect : bool, optional
        Also the lowest indirect gap, the direct margin and the extrema labels
        (default). False leaves ``vbm_label``, ``cbm_label``,
        ``indirect_gap_ev`` and ``direct_margin_ev`` None (the Monte Carlo
        reads none of them); every other field is the same either way.

    Returns
    -------
    GapCharacter
        NamedTuple of (n_compounds, n_layers) arrays, see its fields.

    References
    ----------
    Direct/indirect classification from band extrema: P. Y. Yu and M. Cardona,
    *Fundamentals of Semiconductors*, 4th ed. (2010), ch. 6. Scissor correction:
    common practice.
    """
    owner = np.asarray(owner)
    label = np.asarray(label_code)
    cond = np.asarray(is_conduction, dtype=bool)
    edge = np.asarray(edge_ev, dtype=float)
    if edge.ndim == 1:
        edge = edge[:, None]
    n_v, n_l = edge.shape
    if not (owner.shape == label.shape == cond.shape == (n_v,)):
        raise ValueError("owner, label_code, is_conduction must have length n_valleys")
    if n_v and np.any(np.diff(owner) < 0):
        raise ValueError("owner must be sorted ascending")
    if n_v and (owner[0] < 0 or np.any(label < 0)):
        raise ValueError("owner and label_code must be non-negative")
    if n_compounds is None:
        n_compounds = int(owner[-1]) + 1 if n_v else 0
    if n_v and owner[-1] >= n_compounds:
        raise ValueError("owner index exceeds n_compounds")
    scissor = np.broadcast_to(np.asarray(0.0 if scissor_ev is None else scissor_ev,
                                         dtype=float), (n_compounds,))

    shape = (n_compounds, n_l)
    nan = np.full(shape, np.nan)
    vbm, cbm, fund = nan.copy(), nan.copy(), nan.copy()
    dgap, igap, margin = nan.copy(), nan.copy(), nan.copy()
    vlab = np.full(shape, NO_LABEL, dtype=np.int64)
    clab, dlab = vlab.copy(), vlab.copy()
    is_direct = np.zeros(shape, dtype=bool)
    complete = np.zeros(shape, dtype=bool)
    if n_v == 0:
        return GapCharacter(vbm, vlab, cbm, clab, fund, is_direct, dgap, dlab,
                            igap, margin, complete)

    # absent -> -inf (valence) / +inf (conduction); scissor on conduction edges
    ok = np.isfinite(edge)
    shifted = edge + np.where(cond, scissor[owner], 0.0)[:, None]
    ok &= np.isfinite(shifted)
    val = np.where(ok & ~cond[:, None], edge, -np.inf)
    con = np.where(ok & cond[:, None], shifted, np.inf)

    # groups of (compound, label), contiguous after lexsort
    # (the stable sort of one combined key is lexsort's order; owner is sorted, so it is nearly sorted)
    order = np.argsort(owner.astype(np.int64) * (int(label.max()) + 1) + label, kind="stable")
    o_s, l_s = owner[order], label[order]
    new = np.ones(n_v, dtype=bool)
    new[1:] = (o_s[1:] != o_s[:-1]) | (l_s[1:] != l_s[:-1])
    g_start = np.flatnonzero(new)
    g_owner, g_label = o_s[g_start], l_s[g_start]
    n_g = g_start.size
    if n_g == n_v:   # one valley per (compound, label) group: the group extrema are the valleys'
        v_g, c_g = np.take(val, order, axis=0), np.take(con, order, axis=0)  # (n_g, n_l)
    else:
        groups = segments(g_start, n_v)
        v_g = segment_reduce(np.maximum, np.take(val, order, axis=0), groups)
        c_g = segment_reduce(np.minimum, np.take(con, order, axis=0), groups)
    g_label_ext = np.append(g_label, NO_LABEL)

    # compound segments over the groups
    c_new = np.ones(n_g, dtype=bool)
    c_new[1:] = g_owner[1:] != g_owner[:-1]
    c_start = np.flatnonzero(c_new)
    comp = g_owner[c_start]  # compounds that own valleys
    g2c = np.cumsum(c_new) - 1  # group -> position in comp

    # np.take (and a slice where every compound owns valleys) gives the rows of fancy indexing several
    # times faster for rows of more than one number
    rows = slice(None) if comp.size == n_compounds else comp   # comp is sorted and unique
    by_comp = segments(c_start, n_g)
    v1 = segment_reduce(np.maximum, v_g, by_comp)
    c1 = segment_reduce(np.minimum, c_g, by_comp)
    tol = DEGENERACY_TOL_EV
    with np.errstate(invalid="ignore"):
        d_g = c_g - v_g  # +inf where either band is absent at that label
    dmin = segment_reduce(np.minimum, d_g, by_comp)
    d_lab = g_label_ext[_first_index(np.isfinite(d_g) & (d_g <= np.take(dmin, g2c, axis=0) + tol),
                                     by_comp, n_g)]
    comp_ok = np.isfinite(v1) & np.isfinite(c1)
    fgap = c1 - v1
    direct = comp_ok & np.isfinite(dmin) & (dmin <= fgap + tol)

    def fin(a):
        return np.where(np.isfinite(a) & comp_ok, a, np.nan)

    vbm[rows] = np.where(np.isfinite(v1), v1, np.nan)
    cbm[rows] = np.where(np.isfinite(c1), c1, np.nan)
    fund[rows] = fin(fgap)
    dgap[rows] = fin(dmin)
    dlab[rows] = np.where(np.isfinite(dmin) & comp_ok, d_lab, NO_LABEL)
    is_direct[rows] = direct
    complete[rows] = comp_ok
    if not indirect:
        return GapCharacter(vbm, None, cbm, None, fund, is_direct, dgap, dlab, None, None, complete)

    # best labels (smallest code on exact ties) for the indirect search
    lv1 = g_label_ext[_first_index(v_g == np.take(v1, g2c, axis=0), by_comp, n_g)]
    lc1 = g_label_ext[_first_index(c_g == np.take(c1, g2c, axis=0), by_comp, n_g)]
    v2 = segment_reduce(np.maximum, np.where(g_label[:, None] == np.take(lv1, g2c, axis=0), -np.inf, v_g),
                        by_comp)
    c2 = segment_reduce(np.minimum, np.where(g_label[:, None] == np.take(lc1, g2c, axis=0), np.inf, c_g),
                        by_comp)
    with np.errstate(invalid="ignore"):
        ind = np.where(lv1 != lc1, c1 - v1, np.minimum(c1 - v2, c2 - v1))
        marg = ind - dmin  # inf - finite = inf; finite - inf = -inf
    v_lab = g_label_ext[_first_index(np.isfinite(v_g) & (v_g >= np.take(v1, g2c, axis=0) - tol),
                                     by_comp, n_g)]
    c_lab = g_label_ext[_first_index(np.isfinite(c_g) & (c_g <= np.take(c1, g2c, axis=0) + tol),
                                     by_comp, n_g)]
    v_lab = np.where(direct, d_lab, v_lab)
    c_lab = np.where(direct, d_lab, c_lab)
    vlab[rows] = np.where(np.isfinite(v1), v_lab, NO_LABEL)
    clab[rows] = np.where(np.isfinite(c1), c_lab, NO_LABEL)
    igap[rows] = fin(ind)
    margin[rows] = np.where(comp_ok, marg, np.nan)
    return GapCharacter(vbm, vlab, cbm, clab, fund, is_direct, dgap, dlab, igap,
                        margin, complete)


# --------------------------------------------------------------------------- #
# 3. Crossover with thickness
# --------------------------------------------------------------------------- #
class Crossover(NamedTuple):
    """Result of :func:`layer_crossover`; every field is (n_compounds,)."""

    #: largest N with every given count 1..N direct; 0 if the monolayer is
    #: indirect; UNDETERMINED (-2) if the monolayer character is unknown.
    #: An unknown count stops the scan (the value is then a confirmed lower bound).
    direct_through_layers: np.ndarray
    #: first N (scanning 1..N_max, then bulk) whose character differs from the
    #: monolayer's; BULK (0) if only bulk differs; NO_SWITCH (-1) if none;
    #: UNDETERMINED (-2) if an unknown count is met before any switch.
    character_switch_layers: np.ndarray
    #: monolayer direct (False where unknown)
    monolayer_direct: np.ndarray
    #: bulk direct (False where unknown)
    bulk_direct: np.ndarray


def layer_crossover(is_direct, layers, known=None) -> Crossover:
    """Layer count at which the band-gap character switches.

    Columns are scanned in thickness order N = 1, 2, ..., N_max, then bulk
    (whatever the column order of ``layers``).

    Parameters
    ----------
    is_direct : array_like of bool, shape (n_compounds, n_layers)
        Direct character (e.g. ``GapCharacter.is_direct``).
    layers : array_like of int, shape (n_layers,)
        Layer counts, ``BULK`` (0) for bulk; must contain 1.
    known : array_like of bool, shape (n_compounds, n_layers), optional
        Where the character is decided (e.g. ``GapCharacter.complete``);
        default everywhere.

    Returns
    -------
    Crossover
        ``direct_through_layers``, ``character_switch_layers`` (int, encodings in
        the module docstring), ``monolayer_direct``, ``bulk_direct`` (bool);
        each (n_compounds,).

    References
    ----------
    Common practice.
    """
    layers = _check_layers(layers)
    d = np.asarray(is_direct, dtype=bool)
    if d.ndim != 2 or d.shape[1] != layers.size:
        raise ValueError("is_direct must have shape (n_compounds, len(layers))")
    k = np.ones_like(d) if known is None else np.broadcast_to(
        np.asarray(known, dtype=bool), d.shape)
    if not np.any(layers == 1):
        raise ValueError("layers must contain the monolayer (1)")
    key = np.where(layers == BULK, np.iinfo(np.int64).max, layers.astype(np.int64))
    order = np.argsort(key, kind="stable")
    lay = layers[order]
    d, k = d[:, order], k[:, order]
    n_c = d.shape[0]
    fin = lay != BULK
    n_fin = int(fin.sum())
    mono_known = k[:, 0]
    mono = d[:, 0] & mono_known

    # direct_through: first finite column that is not (known and direct)
    good = d[:, fin] & k[:, fin]
    all_good = good.all(axis=1)
    j = np.where(all_good, n_fin, np.argmin(good, axis=1))
    lay_fin = lay[fin]
    through = np.where(j > 0, lay_fin[np.maximum(j, 1) - 1], 0)
    through = np.where(mono_known, through, UNDETERMINED)

    # switch: first column that is unknown or known-and-different from monolayer
    differs = k & (d != d[:, :1])
    stop = differs | ~k
    any_stop = stop.any(axis=1)
    first = np.argmax(stop, axis=1)
    rows = np.arange(n_c)
    switch = np.where(differs[rows, first], lay[first], UNDETERMINED)
    switch = np.where(any_stop, switch, NO_SWITCH)
    switch = np.where(mono_known, switch, UNDETERMINED)

    has_bulk = np.any(lay == BULK)
    bulk = d[:, -1] & k[:, -1] if has_bulk else np.zeros(n_c, dtype=bool)
    return Crossover(through.astype(np.int64), switch.astype(np.int64), mono, bulk)


# --------------------------------------------------------------------------- #
# 4. Optical gap and emission
# --------------------------------------------------------------------------- #
def optical_gap_ev(direct_gap_ev, binding_ev):
    """Optical (excitonic) gap ``E_opt = E_direct - E_b`` in eV, NaN where not positive.

    Parameters
    ----------
    direct_gap_ev : float or array_like
        Lowest direct quasiparticle gap in eV.
    binding_ev : float or array_like
        Exciton binding energy in eV (positive for a bound exciton); broadcast
        against ``direct_gap_ev``.

    Returns
    -------
    numpy.ndarray
        Optical gap in eV (:func:`optical_gap_of_exciton_ev` of the difference):
        NaN where the binding reaches the direct gap; NaN propagates.

    References
    ----------
    P. Y. Yu and M. Cardona, *Fundamentals of Semiconductors*, 4th ed. (2010),
    sec. 6.3 (excitons).
    """
    return optical_gap_of_exciton_ev(np.asarray(direct_gap_ev, dtype=float) - np.asarray(binding_ev, dtype=float))


def optical_gap_of_exciton_ev(exciton_ev):
    """Optical gap given by a model exciton energy: the energy where positive, else NaN.

    The one rule for every optical-gap value of the screen and the Monte Carlo:
    an exciton energy ``E_gap - E_b <= 0`` means a binding that reaches the
    (pair's) direct gap, outside the effective-mass (Wannier-Mott) model, which
    then gives no optical gap (common practice: the Wannier-Mott picture needs
    a binding well below the gap; such rows are also flagged
    ``binding_beyond_validity``). The exciton energies themselves
    (``bright_exciton_ev``, ``dark_exciton_ev``) and the brightness verdict are
    left as computed.

    Parameters
    ----------
    exciton_ev : float or array_like
        Exciton energy (pair gap minus binding) in eV.

    Returns
    -------
    numpy.ndarray
        The energy in eV where positive; NaN elsewhere (NaN included).
    """
    e = np.asarray(exciton_ev, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.where(e > 0, e, np.nan)


def emission_wavelength_nm(energy_ev):
    """Vacuum photon wavelength ``lambda = h c / E`` in nm.

    Parameters
    ----------
    energy_ev : float or array_like
        Photon energy in eV. Non-positive or non-finite energies give NaN.

    Returns
    -------
    numpy.ndarray
        Wavelength in nm (``lamellume.units.HC_EV_NM / energy_ev``).

    References
    ----------
    CODATA h, c and e via :mod:`scipy.constants`.
    """
    e = np.asarray(energy_ev, dtype=float)
    good = np.isfinite(e) & (e > 0)
    return np.divide(HC_EV_NM, e, out=np.full(e.shape, np.nan), where=good)


def spectral_band(wavelength_nm, bands: Sequence[tuple[str, float, float]],
                  outside: str = OUTSIDE_BAND):
    """Name of the first configured spectral band containing each wavelength.

    Parameters
    ----------
    wavelength_nm : float or array_like
        Vacuum wavelengths in nm.
    bands : sequence of (name, lo_nm, hi_nm)
        Bands in priority order; a wavelength belongs to a band if
        ``lo_nm <= wavelength < hi_nm`` (half-open, so adjacent bands do not
        overlap). The first matching band wins.
    outside : str, optional
        Name for wavelengths in no band, and for NaN (default ``"outside"``).

    Returns
    -------
    numpy.ndarray of object
        Band names, same shape as ``wavelength_nm``.

    References
    ----------
    Common practice.
    """
    w = np.asarray(wavelength_nm, dtype=float)
    names = np.array([str(b[0]) for b in bands] + [outside], dtype=object)
    if len(bands) == 0:
        return np.full(w.shape, outside, dtype=object)
    lo = np.array([float(b[1]) for b in bands])
    hi = np.array([float(b[2]) for b in bands])
    if np.any(~(lo < hi)):
        raise ValueError("each band needs lo_nm < hi_nm")
    flat = w.reshape(-1, 1)
    inside = (flat >= lo) & (flat < hi)  # NaN compares False -> outside
    idx = np.where(inside.any(axis=1), np.argmax(inside, axis=1), len(bands))
    return names[idx].reshape(w.shape)
