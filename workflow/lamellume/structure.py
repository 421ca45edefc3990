"""Layer geometry of a crystal from its CIF text.

The module turns the *text* of a CIF (the I/O layer reads the file) into a
:class:`LayerGeometry`: whether the crystal is built of two-dimensional (2D)
bonded layers, the Cartesian layer normal, the layer repeat distance, the
van der Waals gap between adjacent layers and the in-plane lattice constant.

Everything crystallographic is delegated to pymatgen [1]_: CIF parsing
(:class:`pymatgen.io.cif.CifParser`), bond detection
(:mod:`pymatgen.analysis.local_env`), the bonded-structure graph and the
dimensionality of its connected components (:mod:`pymatgen.analysis.dimensionality`,
the algorithm of Larsen et al. [2]_). This module only adds the layer metrics
(normal, heights, gaps) computed from those components.

Bonding criteria
----------------
``"crystalnn"`` (default)
    :class:`pymatgen.analysis.local_env.CrystalNN` with its default
    parameters [3]_: Voronoi solid angles, weighted by electronegativity
    difference and a smooth distance cutoff on the sum of covalent radii.
    No tunable parameter; ``tolerance`` is ignored. Measured 24-54 ms per
    call for 4-8 site cells and 0.33 s for a 54-site cell
    (``benchmarks/bench_structure.py``).
``"covalent_radii"``
    Sites i and j are bonded when ``d_ij <= (1 + tolerance) * (r_i + r_j)``
    with the covalent radii r of Cordero et al. [4]_ as tabulated in
    :class:`pymatgen.analysis.molecule_structure_comparator.CovalentRadius`;
    this is the criterion of Larsen et al. [2]_ with their scale factor
    ``k = 1 + tolerance``. Evaluated by
    :class:`pymatgen.analysis.local_env.CutOffDictNN`. Measured 6-16 ms per
    call for 4-8 site cells and 74 ms for 54 sites, 2-7x faster than CrystalNN.
    Both criteria agree on every test structure.

Conventions
-----------
Lengths in Angstrom. Vectors are Cartesian in the frame in which pymatgen
builds the lattice from the CIF cell parameters (``c`` along z, ``a`` in the
xz plane; see :meth:`pymatgen.core.Lattice.from_parameters`). The layer normal is a unit
vector whose largest-magnitude Cartesian component is positive.

References
----------
.. [1] S. P. Ong et al., "Python Materials Genomics (pymatgen): A robust,
   open-source python library for materials analysis", Comput. Mater. Sci.
   68, 314 (2013).
.. [2] P. M. Larsen, M. Pandey, M. Strange, K. W. Jacobsen, "Definition of a
   scoring parameter to identify low-dimensional materials components",
   Phys. Rev. Materials 3, 034003 (2019).
.. [3] H. Pan et al., "Benchmarking coordination number prediction algorithms
   on inorganic crystal structures", Inorg. Chem. 60, 1590 (2021).
.. [4] B. Cordero et al., "Covalent radii revisited", Dalton Trans. 2832 (2008).
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import itertools
import logging
import math
import re
import warnings
from dataclasses import dataclass

import numpy as np

__all__ = [
    "BONDING_CRITERIA",
    "LayerGeometry",
    "StructureError",
    "analyse_cif_text",
    "analyse_structure",
    "cif_content_hash",
    "compare_geometry",
]

#: Accepted values of the ``bonding`` argument of :func:`analyse_cif_text`.
BONDING_CRITERIA: tuple[str, ...] = ("crystalnn", "covalent_radii")

#: Default fractional tolerance of the covalent-radii criterion (k = 1.25).
DEFAULT_TOLERANCE: float = 0.25

# Plausibility limits for a crystal handed to the screen (Angstrom, Angstrom^3).
_MIN_LATTICE_LENGTH = 0.5
_MAX_LATTICE_LENGTH = 500.0
_MIN_VOLUME_PER_SITE = 1.0
_MAX_VOLUME_PER_SITE = 1.0e4
_MIN_INTERATOMIC_DISTANCE = 0.5
_MAX_CIF_CHARS = 20_000_000
# Sites whose total occupancy deviates from 1 by more than this are vacancies.
_OCCUPANCY_TOL = 1e-3
# Relative spread of layer thicknesses / gaps that triggers a warning.
_UNIFORMITY_RTOL = 0.02
_MAX_WARNING_CHARS = 300


class StructureError(ValueError):
    """A CIF text that cannot be analysed; the message states why."""


@dataclass(frozen=True)
class LayerGeometry:
    """Layer geometry of one crystal.

    Attributes
    ----------
    formula : str
        Reduced formula (pymatgen ``Composition.reduced_formula``).
    is_layered : bool
        True when every site belongs to a 2D-bonded component and all these
        components share one orientation (a van der Waals stack of layers).
        Mixed-dimensional crystals (e.g. layers plus intercalated 0D ions)
        are reported ``False`` with a warning.
    dimensionality : int
        Larsen dimensionality (0-3): the largest dimensionality over the
        bonded components [2]_.
    layer_normal : tuple of float or None
        Unit normal of the layers, Cartesian (pymatgen's frame of the CIF
        lattice), largest-magnitude component positive. ``None`` when no
        2D component exists.
    repeat_distance_angstrom : float or None
        Layer repeat distance along the normal, Angstrom: the lattice period
        along the normal (the interplanar spacing d_hkl of the layer plane)
        divided by ``layers_per_cell``.
    layers_per_cell : int
        Number of 2D components in the cell (0 when not layered).
    vdw_gap_angstrom : float or None
        Gap between the outermost atomic planes of adjacent layers, along
        the normal, Angstrom: ``repeat_distance_angstrom`` minus the mean
        layer thickness (nuclear positions, not van der Waals radii).
    inplane_lattice_angstrom : float or None
        Length of the shortest lattice vector lying in the layer plane
        (Lagrange-reduced 2D sublattice of the cell), Angstrom.
    warnings : tuple of str
        Non-fatal findings, including pymatgen parser warnings.
    """

    formula: str
    is_layered: bool
    dimensionality: int
    layer_normal: tuple[float, float, float] | None
    repeat_distance_angstrom: float | None
    layers_per_cell: int
    vdw_gap_angstrom: float | None
    inplane_lattice_angstrom: float | None
    warnings: tuple[str, ...] = ()


def cif_content_hash(text: str | bytes) -> str:
    """SHA-256 hex digest of a CIF's content with normalised line endings.

    ``\\r\\n`` and lone ``\\r`` are replaced by ``\\n`` before hashing, so the
    same CIF saved on different platforms gives the same key.

    Parameters
    ----------
    text : str or bytes
        CIF content; ``str`` is encoded as UTF-8 (surrogate escapes kept).

    Returns
    -------
    str
        64-character lowercase hexadecimal digest.
    """
    data = text.encode("utf-8", "surrogateescape") if isinstance(text, str) else bytes(text)
    data = data.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
    return hashlib.sha256(data).hexdigest()


def compare_geometry(given_spacing, given_lattice, geometry, rel_tol=0.05):
    """Compare input-record geometry with the geometry derived from the CIF.

    Policy: the value given in the input record wins (it is what the first-
    principles results were computed with); the structure only checks it.
    A disagreement beyond ``rel_tol`` is reported as a message. When the
    record lacks a value, the structure's value is used and that is reported.

    Parameters
    ----------
    given_spacing : float or None
        Layer spacing from the input record, Angstrom.
    given_lattice : float or None
        In-plane lattice constant from the input record, Angstrom.
    geometry : LayerGeometry or None
        Result of :func:`analyse_cif_text`.
    rel_tol : float
        Relative tolerance, ``|given - derived| / derived``.

    Returns
    -------
    spacing_angstrom : float or None
        Value to use for the layer spacing.
    lattice_angstrom : float or None
        Value to use for the in-plane lattice constant.
    messages : tuple of str
        One message per disagreement or substitution; empty when all agree.
    """
    derived = {
        "layer spacing": None if geometry is None else geometry.repeat_distance_angstrom,
        "in-plane lattice": None if geometry is None else geometry.inplane_lattice_angstrom,
    }
    given = {"layer spacing": given_spacing, "in-plane lattice": given_lattice}
    chosen = {}
    messages = []
    for key in ("layer spacing", "in-plane lattice"):
        g, d = given[key], derived[key]
        g = None if g is None or not math.isfinite(float(g)) else float(g)
        if g is not None:
            chosen[key] = g
            if d is not None and abs(g - d) > rel_tol * abs(d):
                messages.append(
                    f"{key}: input {g:.4g} A disagrees with structure {d:.4g} A "
                    f"(> {rel_tol:.0%}); input value used"
                )
        else:
            chosen[key] = d
            if d is not None:
                messages.append(f"{key}: not given; structure value {d:.4g} A used")
    return chosen["layer spacing"], chosen["in-plane lattice"], tuple(messages)


@contextlib.contextmanager
def _quiet(captured: list[str]):
    """Capture Python warnings, stdout/stderr and pymatgen log records."""
    out = io.StringIO()
    logger = logging.getLogger("pymatgen")
    old_level, old_prop = logger.level, logger.propagate
    logger.setLevel(logging.CRITICAL + 1)
    logger.propagate = False
    try:
        with (
            warnings.catch_warnings(record=True) as rec,
            contextlib.redirect_stdout(out),
            contextlib.redirect_stderr(out),
        ):
            warnings.simplefilter("always")
            np_err = np.seterr(all="ignore")
            try:
                yield
            finally:
                np.seterr(**np_err)
                for w in rec:
                    captured.append(str(w.message))
    finally:
        logger.setLevel(old_level)
        logger.propagate = old_prop


# Generic CrystalNN notices emitted for every structure without oxidation states; not
# informative for a screen, so they are dropped rather than attached to every result.
_BENIGN_PREFIXES = (
    "No oxidation states specified on sites",
    "CrystalNN: cannot locate an appropriate radius",
)


def _clean_warnings(raw: list[str]) -> list[str]:
    seen: list[str] = []
    for msg in raw:
        msg = " ".join(msg.split())
        if msg.startswith(_BENIGN_PREFIXES):
            continue
        if len(msg) > _MAX_WARNING_CHARS:
            msg = msg[: _MAX_WARNING_CHARS - 3] + "..."
        msg = "pymatgen: " + msg
        if msg not in seen:
            seen.append(msg)
    return seen


def _decode(cif_text) -> str:
    if isinstance(cif_text, (bytes, bytearray, memoryview)):
        try:
            cif_text = bytes(cif_text).decode("utf-8")
        except UnicodeDecodeError as exc:
            raise StructureError(f"CIF is not valid UTF-8 text ({exc.reason} at byte {exc.start})") from None
    if not isinstance(cif_text, str):
        raise StructureError(f"CIF text must be str or bytes, got {type(cif_text).__name__}")
    if len(cif_text) > _MAX_CIF_CHARS:
        raise StructureError(f"CIF text too long ({len(cif_text)} characters)")
    if not cif_text.strip():
        raise StructureError("CIF text is empty")
    if "\x00" in cif_text:
        raise StructureError("CIF text contains NUL bytes (binary data, not a CIF)")
    try:
        cif_text.encode("utf-8")
    except UnicodeEncodeError:
        raise StructureError("CIF text contains undecodable bytes (not valid UTF-8)") from None
    _check_cell_fields(cif_text)
    return cif_text


_CELL_FIELDS = ("_cell_length_a", "_cell_length_b", "_cell_length_c",
                "_cell_angle_alpha", "_cell_angle_beta", "_cell_angle_gamma")


def _check_cell_fields(cif_text: str) -> None:
    """Reject missing, non-numeric, non-finite or non-positive cell parameters early.

    pymatgen would also fail on most of these, but with less specific messages
    (and it silently takes the absolute value of a negative cell length).
    """
    first = {}
    for name in _CELL_FIELDS:
        values = re.findall(rf"^[ \t]*{name}[ \t]+(\S+)", cif_text, flags=re.IGNORECASE | re.MULTILINE)
        if not values:
            if name.startswith("_cell_length"):
                raise StructureError(f"CIF has no cell parameter {name}")
            continue  # pymatgen defaults missing angles to 90 degrees
        for raw in values:
            try:
                x = float(re.sub(r"\(\d*\)$", "", raw.strip("'\"")))  # drop "(esd)"
            except ValueError:
                raise StructureError(f"cell parameter {name} = {raw!r} is not a number") from None
            if not math.isfinite(x):
                raise StructureError(f"cell parameter {name} = {raw!r} is not finite")
            if name.startswith("_cell_length") and x <= 0.0:
                raise StructureError(f"cell parameter {name} = {raw!r} is not positive")
            if name.startswith("_cell_length") and x > _MAX_LATTICE_LENGTH:
                raise StructureError(f"cell parameter {name} = {raw!r} exceeds {_MAX_LATTICE_LENGTH} A")
            if name.startswith("_cell_angle") and not 0.0 < x < 180.0:
                raise StructureError(f"cell parameter {name} = {raw!r} outside (0, 180) degrees")
            first.setdefault(name, x)
    angles = [first.get(n, 90.0) for n in _CELL_FIELDS[3:]]
    ca, cb, cg = np.cos(np.radians(angles))
    if 1.0 - ca * ca - cb * cb - cg * cg + 2.0 * ca * cb * cg <= 1e-6:
        raise StructureError(f"cell angles {tuple(angles)} deg give a zero-volume (degenerate) cell")


def _no_structure_reason(captured: list[str]) -> str:
    """pymatgen's reason for skipping a data block, taken from its warnings."""
    key = "No structure parsed for section"
    for msg in captured:
        if key in msg:
            tail = msg[msg.index(key):].split("\n", 2)
            if len(tail) > 1 and tail[1].strip():
                return " ".join(tail[1].split())[:_MAX_WARNING_CHARS]
    return ""


def _parse(cif_text: str, captured: list[str]):
    from pymatgen.io.cif import CifParser

    try:
        with _quiet(captured):
            parser = CifParser.from_str(cif_text, occupancy_tolerance=1.0)
            structures = parser.parse_structures(primitive=False, on_error="warn")
    except StructureError:
        raise
    except Exception as exc:  # pymatgen raises many types on malformed text
        reason = " ".join(str(exc).split())[:_MAX_WARNING_CHARS] or type(exc).__name__
        detail = _no_structure_reason(captured)
        if detail:
            raise StructureError(f"CIF holds no readable structure: {detail}") from None
        raise StructureError(f"CIF could not be parsed: {reason}") from None
    if not structures:
        detail = _no_structure_reason(captured)
        raise StructureError("CIF holds no readable structure" + (f": {detail}" if detail else ""))
    if len(structures) > 1:
        raise StructureError(f"CIF holds {len(structures)} structures (data blocks); expected exactly one")
    return structures[0]


def _validate(structure, notes: list[str]):
    """Check a parsed structure for physical sanity; resolve substitutional disorder."""
    if len(structure) == 0:
        raise StructureError("CIF structure has no atoms")
    lat = structure.lattice
    params = np.array(lat.abc + lat.angles, dtype=float)
    if not np.all(np.isfinite(params)) or not np.all(np.isfinite(lat.matrix)):
        raise StructureError("cell parameters are not finite")
    volume = float(abs(np.linalg.det(lat.matrix)))
    if not math.isfinite(volume) or volume <= 0.0:
        raise StructureError("cell volume is zero or not finite")
    if min(lat.abc) < _MIN_LATTICE_LENGTH or max(lat.abc) > _MAX_LATTICE_LENGTH:
        raise StructureError(
            f"implausible cell lengths {tuple(round(x, 4) for x in lat.abc)} A "
            f"(allowed {_MIN_LATTICE_LENGTH}-{_MAX_LATTICE_LENGTH} A)"
        )
    vps = volume / len(structure)
    if not (_MIN_VOLUME_PER_SITE <= vps <= _MAX_VOLUME_PER_SITE):
        raise StructureError(f"implausible volume per site {vps:.4g} A^3")
    if not np.all(np.isfinite(structure.frac_coords)):
        raise StructureError("atomic coordinates are not finite")

    if not structure.is_ordered:
        from pymatgen.core import Structure

        species, coords = [], []
        for site in structure:
            occ = sum(site.species.values())
            if abs(occ - 1.0) > _OCCUPANCY_TOL:
                raise StructureError(
                    f"partial occupancy {occ:.3g} at {site.species} (vacancies): bonding "
                    "and layer analysis are meaningless for a disordered average structure"
                )
            major = max(site.species.items(), key=lambda kv: kv[1])[0]
            species.append(major)
            coords.append(site.frac_coords)
        notes.append("substitutional disorder: each mixed site replaced by its majority species")
        structure = Structure(structure.lattice, species, coords)

    from pymatgen.core import DummySpecies, Element, Species  # here, not at import: compare_geometry needs no pymatgen

    for el in structure.composition.elements:
        if isinstance(el, DummySpecies) or not isinstance(el, (Element, Species)):
            raise StructureError(f"unknown element {getattr(el, 'symbol', el)!r}")
    if len(structure) > 1:
        dmin = float(np.min(structure.distance_matrix + np.eye(len(structure)) * 1e9))
        # Self-images: a site closer than the limit to its own periodic image
        if dmin < _MIN_INTERATOMIC_DISTANCE:
            raise StructureError(f"atoms overlap (shortest distance {dmin:.3g} A)")
    return structure


def _bonded_structure(structure, bonding: str, tolerance: float):
    from pymatgen.analysis.local_env import CrystalNN, CutOffDictNN

    if bonding == "crystalnn":
        nn = CrystalNN()
    else:
        from pymatgen.analysis.molecule_structure_comparator import CovalentRadius

        symbols = sorted({el.symbol for el in structure.composition.elements})
        missing = [s for s in symbols if s not in CovalentRadius.radius]
        if missing:
            raise StructureError(f"no covalent radius tabulated for {missing}")
        scale = 1.0 + tolerance
        cutoffs = {
            (a, b): scale * (CovalentRadius.radius[a] + CovalentRadius.radius[b])
            for a, b in itertools.combinations_with_replacement(symbols, 2)
        }
        nn = CutOffDictNN(cutoffs)
    return nn.get_bonded_structure(structure)


def _canonical_sign(vec: np.ndarray) -> np.ndarray:
    i = int(np.argmax(np.abs(vec) - 1e-9 * np.arange(vec.size)))
    return -vec if vec[i] < 0 else vec


def _inplane_shortest(lattice_matrix: np.ndarray, miller: np.ndarray) -> float:
    """Shortest lattice vector t (integer, h.t = 0) by Lagrange reduction, Angstrom."""
    r = int(np.max(np.abs(miller))) + 1
    grid = np.array(list(itertools.product(range(-r, r + 1), repeat=3)))
    ker = grid[(grid @ miller == 0) & np.any(grid != 0, axis=1)]
    # A basis (u, v) of the kernel lattice has u x v = +-h for primitive h.
    cross = np.cross(ker[:, None, :], ker[None, :, :])
    ok = np.all(cross == miller, axis=2)
    if not ok.any():
        raise StructureError(f"no in-plane lattice basis found for layer plane {tuple(miller)}")
    iu, iv = np.argwhere(ok)[0]
    u = ker[iu] @ lattice_matrix
    v = ker[iv] @ lattice_matrix
    while True:  # Lagrange (Gauss) reduction of the 2D basis
        if u @ u > v @ v:
            u, v = v, u
        mu = round(float(u @ v) / float(u @ u))
        if mu == 0:
            break
        v = v - mu * u
    return float(np.linalg.norm(u))


def _component_heights(bonded, site_ids, normal: np.ndarray) -> np.ndarray:
    """Heights along ``normal`` of a component's sites, unwrapped through its bonds."""
    cart = bonded.structure.cart_coords
    lat = bonded.structure.lattice.matrix
    ids = list(site_ids)
    members = set(ids)
    pos = {ids[0]: cart[ids[0]]}
    queue = [ids[0]]
    while queue:
        i = queue.pop()
        for cs in bonded.get_connected_sites(i):
            j = cs.index
            if j in members and j not in pos:
                # jimage of the connected site is relative to the image of i in the home cell
                pos[j] = pos[i] + (cart[j] + np.asarray(cs.jimage) @ lat - cart[i])
                queue.append(j)
    return np.array([pos[i] @ normal for i in ids if i in pos])


def _layer_metrics(structure, bonded, components, layers, all_warnings):
    """Normal, repeat distance, layer count, gap and in-plane lattice of the 2D components."""
    lattice = structure.lattice
    recip = lattice.reciprocal_lattice_crystallographic.matrix  # rows b_i, no 2*pi
    millers = []
    for c in layers:
        h = np.array(c["orientation"], dtype=int)
        h = h // math.gcd(*(int(x) for x in h))
        g = h @ recip
        if not np.array_equal(_canonical_sign(g), g):
            h = -h
        millers.append(tuple(int(x) for x in h))
    distinct = sorted(set(millers))
    miller = np.array(millers[0])
    if len(distinct) > 1:
        all_warnings.append(f"2D components with different orientations {distinct}; first one used")
    n_in_layers = sum(len(c["site_ids"]) for c in layers)
    is_layered = len(distinct) == 1 and n_in_layers == len(structure)
    if n_in_layers != len(structure):
        other = sorted({int(c["dimensionality"]) for c in components if int(c["dimensionality"]) != 2})
        all_warnings.append(
            f"mixed dimensionality: {len(structure) - n_in_layers} of {len(structure)} sites lie in "
            f"{other}-dimensional components between the layers; not treated as layered"
        )

    g = miller @ recip
    period = 1.0 / float(np.linalg.norm(g))  # d_hkl, Angstrom
    normal = g * period
    same = [c for c, m in zip(layers, millers) if m == tuple(miller)]
    n_layers = len(same)
    repeat = period / n_layers

    # Layer slabs along the normal: heights unwrapped through bonds, folded into one period.
    slabs = []
    for c in same:
        hts = _component_heights(bonded, c["site_ids"], normal)
        lo, hi = float(hts.min()), float(hts.max())
        shift = math.floor(0.5 * (lo + hi) / period) * period
        slabs.append((lo - shift, hi - shift))
    slabs.sort()
    thick = np.array([hi - lo for lo, hi in slabs])
    lows = np.array([lo for lo, _ in slabs])
    highs = np.array([hi for _, hi in slabs])
    gaps = np.roll(lows, -1) + np.where(np.arange(n_layers) == n_layers - 1, period, 0.0) - highs
    vdw_gap = repeat - float(thick.mean())
    if np.ptp(thick) > _UNIFORMITY_RTOL * repeat:
        all_warnings.append(f"layers differ in thickness ({np.round(thick, 3).tolist()} A); mean used")
    if np.ptp(gaps) > _UNIFORMITY_RTOL * repeat:
        all_warnings.append(f"non-uniform interlayer gaps ({np.round(gaps, 3).tolist()} A); mean used")
    if vdw_gap <= 0.0:
        all_warnings.append(f"layers interpenetrate along the normal (gap {vdw_gap:.3f} A)")
    inplane = _inplane_shortest(lattice.matrix, miller)

    return is_layered, normal, repeat, n_layers, vdw_gap, inplane


def analyse_cif_text(cif_text, *, bonding: str = "crystalnn", tolerance: float = DEFAULT_TOLERANCE) -> LayerGeometry:
    """Layer geometry of the crystal in a CIF text.

    The CIF is parsed with pymatgen (conventional cell as written, not
    reduced to a primitive cell), bonds are assigned with the chosen
    criterion, and the bonded structure is split into connected components
    whose dimensionality is computed with the algorithm of Larsen et al.
    [2]_. For the 2D components pymatgen gives the Miller index (h k l) of the
    layer plane; the Cartesian normal is ``h b1 + k b2 + l b3`` normalised
    (b_i the reciprocal basis), the lattice period along the normal is the
    interplanar spacing ``d_hkl = 1 / |h b1 + k b2 + l b3|``, and the atom
    heights of each layer along the normal give its thickness.

    Parameters
    ----------
    cif_text : str or bytes
        Text of a CIF file holding exactly one structure. Bytes must be UTF-8.
    bonding : {"crystalnn", "covalent_radii"}
        Bonding criterion (see module docstring).
    tolerance : float
        For ``"covalent_radii"``: fractional tolerance on the sum of covalent
        radii, bond when ``d <= (1 + tolerance)(r_i + r_j)``; dimensionless,
        in [0, 1). Ignored for ``"crystalnn"``.

    Returns
    -------
    LayerGeometry
        Lengths in Angstrom; see :class:`LayerGeometry`.

    Raises
    ------
    StructureError
        Empty, binary or non-UTF-8 text; unparsable CIF; no or several
        structures; non-finite, zero-volume or implausible cell; unknown
        elements; overlapping atoms; partial occupancy (vacancies); bad
        arguments. pymatgen warnings are captured, never printed.

    References
    ----------
    .. [1] S. P. Ong et al., Comput. Mater. Sci. 68, 314 (2013).
    .. [2] P. M. Larsen, M. Pandey, M. Strange, K. W. Jacobsen,
       Phys. Rev. Materials 3, 034003 (2019).
    """
    if bonding not in BONDING_CRITERIA:
        raise StructureError(f"unknown bonding criterion {bonding!r}; choose one of {BONDING_CRITERIA}")
    try:
        tolerance = float(tolerance)
    except (TypeError, ValueError):
        raise StructureError(f"tolerance must be a number, got {tolerance!r}") from None
    if not (0.0 <= tolerance < 1.0):
        raise StructureError(f"tolerance must lie in [0, 1), got {tolerance}")

    text = _decode(cif_text)
    captured: list[str] = []
    structure = _parse(text, captured)
    return _analyse(structure, bonding, tolerance, captured)


def analyse_structure(structure, *, bonding: str = "crystalnn", tolerance: float = DEFAULT_TOLERANCE) -> LayerGeometry:
    """Layer geometry of a pymatgen ``Structure`` (e.g. one embedded in a band-structure file).

    The same analysis as :func:`analyse_cif_text` without the CIF parsing step.

    Raises
    ------
    StructureError
        As :func:`analyse_cif_text`, for the checks that follow parsing.
    """
    if bonding not in BONDING_CRITERIA:
        raise StructureError(f"unknown bonding criterion {bonding!r}; choose one of {BONDING_CRITERIA}")
    return _analyse(structure, bonding, float(tolerance), [])


def _analyse(structure, bonding: str, tolerance: float, captured: list[str]) -> LayerGeometry:
    notes: list[str] = []
    try:
        with _quiet(captured):
            structure = _validate(structure, notes)
            bonded = _bonded_structure(structure, bonding, tolerance)
            from pymatgen.analysis.dimensionality import get_structure_components

            components = get_structure_components(bonded, inc_orientation=True, inc_site_ids=True)
    except StructureError:
        raise
    except Exception as exc:
        reason = " ".join(str(exc).split())[:_MAX_WARNING_CHARS] or type(exc).__name__
        raise StructureError(f"structure analysis failed: {reason}") from None

    all_warnings = _clean_warnings(captured) + notes
    formula = structure.composition.reduced_formula
    # Larsen dimensionality = max over components (get_dimensionality_larsen does exactly this).
    dimensionality = int(max(int(c["dimensionality"]) for c in components))
    layers = [c for c in components if int(c["dimensionality"]) == 2]

    if not layers:
        return LayerGeometry(formula, False, dimensionality, None, None, 0, None, None, tuple(all_warnings))

    try:
        with _quiet(captured):
            is_layered, normal, repeat, n_layers, vdw_gap, inplane = _layer_metrics(
                structure, bonded, components, layers, all_warnings
            )
    except StructureError:
        raise
    except Exception as exc:
        reason = " ".join(str(exc).split())[:_MAX_WARNING_CHARS] or type(exc).__name__
        raise StructureError(f"layer analysis failed: {reason}") from None

    return LayerGeometry(
        formula=formula,
        is_layered=bool(is_layered),
        dimensionality=dimensionality,
        layer_normal=tuple(float(x) for x in normal),
        repeat_distance_angstrom=float(repeat),
        layers_per_cell=int(n_layers),
        vdw_gap_angstrom=float(vdw_gap),
        inplane_lattice_angstrom=inplane,
        warnings=tuple(all_warnings),
    )
