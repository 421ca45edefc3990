"""From first-principles band structures to the valleys of a compound record.

Pure logic of the import stage (no file I/O; :mod:`lamellume.calcio` reads
the files). Each calculation of a compound (one per layer count: 1, 2, ...,
bulk) arrives as a :class:`BandData` (plain arrays: k points, band energies,
labels) plus its crystal structure and its layer geometry. This module

1. puts the k points in the layer frame (z along the layer normal, in-plane axes
   of :func:`lamellume.dielectric.rotation_to_layer_frame`, the axes in which
   the record's dielectric tensor and masses are expressed);
2. finds the extrema (valleys) of the highest valence and lowest conduction
   band (:func:`find_extrema`);
3. matches them across layer counts by their in-plane position, so one valley
   keeps one label (:func:`match_valleys`);
4. collects the band samples around each valley, adds their images under the
   little group of the valley's k point, and fits the in-plane mass tensor with
   the existing band-sample fit (:func:`lamellume.bandfit.fit_effective_mass`)
   (:func:`valley_samples`, :func:`fit_valley`);
5. puts every energy on the vacuum level (:func:`vacuum_level_from_profile`,
   :func:`common_reference`).

Units: eV, Angstrom, 1/Angstrom (k with the factor 2 pi, as pymatgen's
reciprocal lattice), free-electron masses.

Valley labels (the naming rule)
-------------------------------
* An extremum at a labelled k point of the band structure (``labels_dict``)
  takes that label, cleaned to the record's label alphabet: TeX markup is
  dropped (``\\Gamma`` -> ``Gamma``, ``K$_1$`` -> ``K_1``) and any other
  character outside ``A-Z a-z 0-9 _ ' + -`` becomes ``_``.
* An extremum inside a path segment A-B (line mode) is named ``A-B_<p>`` with
  ``p`` the percentage of the segment length from A, rounded to an integer
  (e.g. ``Gamma-K_48``).
* An extremum of a uniform grid away from every labelled point is named after
  the labelled point nearest to it (over all images under the lattice and the
  point group) and its distance from that point in 0.01 1/Angstrom:
  ``<P>_<d>`` (e.g. ``Gamma_41``); ``k_<d>`` from Gamma when the file holds no
  labels.
* Positions are compared by their *in-plane fingerprint*: the three smallest
  distances from the in-plane projection of k to the points of the in-plane
  reciprocal lattice. It does not depend on the cell setting, the in-plane
  axes or k_z, and is the same for all images of a point under the lattice
  symmetry. Two extrema are the same valley when their fingerprints agree within
  :data:`FINGERPRINT_TOL` of the in-plane reciprocal lattice constant.
  Symmetry-equivalent extrema of one calculation (K and K', the six points
  between Gamma and K) are one valley; the projections of bulk points at other
  k_z (H above K) join the in-plane valley, which takes the best energy over k_z.
* Labels are given in layer-count order (1, 2, ..., bulk): a valley keeps the
  label it got in the first calculation where it appears, and a valence and a
  conduction valley at the same position share a label (the record's rule for
  a direct transition).

References
----------
.. [1] N. W. Ashcroft, N. D. Mermin, *Solid State Physics* (1976), ch. 8 and 12
   (little group of k; effective-mass tensor as inverse band curvature).
.. [2] S. P. Ong et al., Comput. Mater. Sci. 68, 314 (2013) (pymatgen).
.. [3] A. Togo, I. Tanaka, "Spglib: a software library for crystal symmetry
   search", arXiv:1808.01590 (2018) (symmetry operations).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

import numpy as np

from lamellume import bandfit
from lamellume.dielectric import rotation_to_layer_frame

__all__ = [
    "BandData", "CalcFrame", "Extremum", "ImportProblem", "Valley", "ValleyFit",
    "band_edges", "common_reference", "find_extrema", "fingerprints", "fit_valley",
    "layer_rotation", "layer_frame", "match_valleys", "point_operations",
    "sanitize_label", "segments_from_labels", "vacuum_level_from_profile", "valley_samples",
]

#: Fingerprints closer than this fraction of the in-plane reciprocal lattice constant match.
FINGERPRINT_TOL = 0.03
#: A k point carries a label when its fractional coordinates match within this (pymatgen's rule).
LABEL_TOL = 1e-4
#: Band energies within this of the Fermi level count as on its side (pymatgen's is_metal tolerance), eV.
EFERMI_TOL_EV = 1e-4
#: Spins as pymatgen serialises them.
SPIN_KEYS = ("1", "-1")
_LABEL_OK = re.compile(r"[^A-Za-z0-9_'+-]")
# Fit failures that show a candidate is no extremum in the plane (lamellume.bandfit messages).
_NOT_EXTREMUM = re.compile(r"saddle point|wrong sign|flat direction")


class ImportProblem(ValueError):
    """A calculation or description that cannot be imported: file, field and reason."""

    def __init__(self, file: str, field: str, reason: str):
        super().__init__(f"{file}: {field}: {reason}")
        self.file, self.field, self.reason = file, field, reason


@dataclass(frozen=True, eq=False)
class BandData:
    """One band structure as plain arrays (as serialised by pymatgen).

    Attributes
    ----------
    kpoints_frac : ndarray, shape (nk, 3)
        k points in fractional coordinates of the reciprocal lattice.
    reciprocal : ndarray, shape (3, 3)
        Reciprocal lattice vectors (rows), 1/Angstrom, factor 2 pi included,
        Cartesian frame of the structure.
    energies_ev : ndarray, shape (nspin, nbands, nk)
        Band energies, eV (spin up first).
    efermi_ev : float
        Fermi level, eV.
    labels : dict of str to ndarray
        Labelled k points (label as in the file -> fractional coordinates).
    line_mode : bool
        True for a path of segments (pymatgen ``BandStructureSymmLine``),
        False for a set of k points (uniform grid).
    """

    kpoints_frac: np.ndarray
    reciprocal: np.ndarray
    energies_ev: np.ndarray
    efermi_ev: float
    labels: dict
    line_mode: bool

    @property
    def spin_polarized(self) -> bool:
        return self.energies_ev.shape[0] == 2


def sanitize_label(raw: str) -> str:
    """A k-point label in the record's alphabet (module docstring, naming rule)."""
    text = raw.strip().replace("\\", "").replace("$", "").replace("{", "").replace("}", "")
    text = text.replace("mathrm", "").replace("^", "")
    text = _LABEL_OK.sub("_", text).strip("_") or "k"
    return text[:24]


def kpoint_labels(band: BandData) -> list[str | None]:
    """Label of every k point (None when unlabelled), pymatgen's matching rule."""
    out: list[str | None] = [None] * len(band.kpoints_frac)
    for label, frac in band.labels.items():
        hit = np.linalg.norm(band.kpoints_frac - np.asarray(frac, dtype=float), axis=1) < LABEL_TOL
        for i in np.flatnonzero(hit):
            out[i] = label
    return out


def segments_from_labels(labels: list[str | None]) -> list[tuple[int, int]]:
    """Path segments (first and last index) of a line-mode k list.

    Two consecutive labelled k points end one segment and start the next (the
    rule of pymatgen's ``BandStructureSymmLine`` branches): ``G .. M M .. K``
    gives the segments G-M and M-K, ``.. K G ..`` a jump from K to G.
    """
    segments, start = [], 0
    for i in range(1, len(labels)):
        if labels[i] is not None and labels[i - 1] is not None:
            segments.append((start, i - 1))
            start = i
    segments.append((start, len(labels) - 1))
    return [s for s in segments if s[1] > s[0]]


def band_edges(energies_ev: np.ndarray, efermi_ev: float, file: str) -> list[tuple[int, int]]:
    """Index of the highest valence and lowest conduction band, per spin.

    A band is valence when all its energies lie at or below the Fermi level
    (within :data:`EFERMI_TOL_EV`), conduction when all lie at or above it.

    Raises
    ------
    ImportProblem
        A band crosses the Fermi level (metal), or no valence or no conduction band.
    """
    out = []
    for s in range(energies_ev.shape[0]):
        e = energies_ev[s]
        below = np.all(e <= efermi_ev + EFERMI_TOL_EV, axis=1)
        above = np.all(e >= efermi_ev - EFERMI_TOL_EV, axis=1)
        crossing = np.flatnonzero(~below & ~above)
        spin = SPIN_KEYS[s]
        if crossing.size:
            raise ImportProblem(file, f"bands.{spin}", f"band {crossing[0]} crosses the Fermi level "
                                f"{efermi_ev:.4f} eV: a metal has no band gap to import")
        if not below.any() or not above.any():
            raise ImportProblem(file, f"bands.{spin}", "needs at least one band below and one above the Fermi level")
        vb = int(np.flatnonzero(below).max())
        if vb + 1 >= e.shape[0] or not above[vb + 1]:
            raise ImportProblem(file, f"bands.{spin}", "bands are not ordered by energy at every k point")
        out.append((vb, vb + 1))
    return out


# --------------------------------------------------------------------------- frames


@dataclass(frozen=True, eq=False)
class CalcFrame:
    """The layer frame of one calculation.

    Attributes
    ----------
    rotation : ndarray (3, 3)
        Rows e1, e2, n in the structure's Cartesian frame.
    reciprocal_2d : ndarray (2, 2)
        In-plane reciprocal lattice vectors (rows), layer frame, 1/Angstrom.
    k_layer : ndarray (nk, 3)
        k points in the layer frame, 1/Angstrom.
    """

    rotation: np.ndarray
    reciprocal_2d: np.ndarray
    k_layer: np.ndarray

    @property
    def k_inplane(self) -> np.ndarray:
        return self.k_layer[:, :2]

    @property
    def reciprocal_constant(self) -> float:
        """Length of the shortest in-plane reciprocal vector, 1/Angstrom."""
        return float(np.min(np.linalg.norm(self.reciprocal_2d, axis=1)))


def _inplane_basis(lattice_layer: np.ndarray) -> np.ndarray:
    """Gauss-reduced basis (rows, 2D) of the lattice vectors in the plane z = 0 of a frame."""
    rng = np.arange(-3, 4)
    m = np.array(np.meshgrid(rng, rng, rng, indexing="ij")).reshape(3, -1).T
    m = m[np.any(m != 0, axis=1)]
    v = m @ lattice_layer
    length = np.linalg.norm(v, axis=1)
    inplane = np.abs(v[:, 2]) < 1e-3 * length
    v, length = v[inplane][:, :2], length[inplane]
    if len(v) < 2:
        raise ValueError("no lattice vectors lie in the layer plane")
    order = np.lexsort((-v[:, 0], np.round(length, 6)))
    a1 = v[order[0]]
    for i in order[1:]:
        if abs(a1[0] * v[i, 1] - a1[1] * v[i, 0]) > 1e-6 * length[i] * np.linalg.norm(a1):
            a2 = v[i]
            break
    else:
        raise ValueError("the lattice vectors in the layer plane are collinear")
    for _ in range(50):  # Lagrange-Gauss reduction
        if np.dot(a2, a2) < np.dot(a1, a1) - 1e-9:
            a1, a2 = a2, a1
        mu = round(float(np.dot(a1, a2) / np.dot(a1, a1)))
        if mu == 0:
            break
        a2 = a2 - mu * a1
    return np.array([a1, a2])


def layer_rotation(lattice_matrix: np.ndarray, normal) -> tuple[np.ndarray, np.ndarray]:
    """Rotation into the layer frame of a structure and its in-plane reciprocal basis.

    The frame has z along the layer normal (:func:`lamellume.dielectric.rotation_to_layer_frame`)
    and x along the shortest in-plane lattice vector a1, so every calculation of
    a compound, whatever its cell setting, gives its tensors in the same
    in-plane axes (up to a symmetry of the 2D lattice).

    Returns
    -------
    rotation : ndarray (3, 3)
        Rows e1, e2, n in the structure's Cartesian frame.
    reciprocal_2d : ndarray (2, 2)
        Gauss-reduced in-plane reciprocal basis (rows, layer frame, 1/Angstrom, 2 pi included).

    Raises
    ------
    ValueError
        No two lattice vectors lie in the layer plane.
    """
    first = rotation_to_layer_frame(np.asarray(normal, dtype=float))
    basis = _inplane_basis(np.asarray(lattice_matrix, dtype=float) @ first.T)
    phi = math.atan2(basis[0, 1], basis[0, 0])
    c, s = math.cos(phi), math.sin(phi)
    q = np.array([[c, s, 0.0], [-s, c, 0.0], [0.0, 0.0, 1.0]])  # turns a1 onto +x
    basis = basis @ q[:2, :2].T
    return q @ first, 2.0 * np.pi * np.linalg.inv(basis).T


def inplane_lattice_constant(reciprocal_2d: np.ndarray) -> float:
    """Length of the shortest in-plane lattice vector, Angstrom."""
    basis = 2.0 * np.pi * np.linalg.inv(reciprocal_2d).T
    return float(np.min(np.linalg.norm(basis, axis=1)))


def layer_frame(band: BandData, lattice_matrix: np.ndarray, normal) -> CalcFrame:
    """k points of a band structure in the layer frame of its structure (:func:`layer_rotation`)."""
    rot, rec2 = layer_rotation(lattice_matrix, normal)
    k_cart = band.kpoints_frac @ band.reciprocal
    return CalcFrame(rot, rec2, k_cart @ rot.T)


def fingerprints(k_inplane: np.ndarray, reciprocal_2d: np.ndarray) -> np.ndarray:
    """In-plane fingerprints (module docstring): the three smallest |k - G|, 1/Angstrom.

    Parameters
    ----------
    k_inplane : ndarray (m, 2)
        In-plane k, layer frame, 1/Angstrom.
    reciprocal_2d : ndarray (2, 2)
        Gauss-reduced in-plane reciprocal basis (rows).
    """
    k = np.atleast_2d(k_inplane)
    frac = k @ np.linalg.inv(reciprocal_2d)
    folded = (frac - np.round(frac)) @ reciprocal_2d  # image near the origin
    n = np.arange(-2, 3)
    g = np.array(np.meshgrid(n, n, indexing="ij")).reshape(2, -1).T @ reciprocal_2d
    d = np.linalg.norm(folded[:, None, :] - g[None, :, :], axis=-1)
    return np.sort(d, axis=1)[:, :3]


def point_operations(structure) -> np.ndarray:
    """Point-group rotations of a structure in fractional real-space coordinates, shape (n, 3, 3).

    From spglib through pymatgen's ``SpacegroupAnalyzer`` [3]_ (tolerance 0.01 Angstrom).
    Magnetic moments are not considered.
    """
    from pymatgen.symmetry.analyzer import SpacegroupAnalyzer

    try:
        data = SpacegroupAnalyzer(structure, symprec=0.01).get_symmetry_dataset()
        rotations = np.asarray(data.rotations if hasattr(data, "rotations") else data["rotations"])
    except Exception:  # spglib finds no symmetry: identity only
        rotations = np.eye(3, dtype=int)[None]
    return np.unique(rotations.astype(int), axis=0)


# --------------------------------------------------------------------------- extrema


@dataclass(frozen=True)
class Extremum:
    """A local extremum of the highest valence or lowest conduction band of one calculation.

    ``index`` is the k-point index, ``spin`` 0 or 1, ``band`` "valence" or
    "conduction", ``energy_ev`` on the file's scale, ``label`` by the naming
    rule, ``labelled`` True at a labelled k point, ``fingerprint`` the in-plane
    fingerprint (1/Angstrom).
    """

    index: int
    spin: int
    band: str
    energy_ev: float
    label: str
    labelled: bool
    fingerprint: tuple


def _neighbours_line(band: BandData, labels: list[str | None]) -> tuple[np.ndarray, list[set]]:
    """Node of every k point (labelled points merged by label) and the neighbour nodes of each node."""
    node = np.arange(len(labels))
    first: dict[str, int] = {}
    for i, lab in enumerate(labels):
        if lab is not None:
            node[i] = first.setdefault(lab, i)
    nbrs: list[set] = [set() for _ in labels]
    for start, end in segments_from_labels(labels):
        for i in range(start, end):
            a, b = node[i], node[i + 1]
            if a != b:
                nbrs[a].add(int(b))
                nbrs[b].add(int(a))
    return node, nbrs


def _grid_shape(frac: np.ndarray, file: str) -> tuple[int, int, int]:
    shape = []
    for j in range(3):
        f = np.unique(np.round(np.mod(frac[:, j], 1.0), 9) % 1.0)
        if len(f) == 1:
            shape.append(1)
            continue
        gaps = np.diff(np.r_[f, f[0] + 1.0])
        n = int(round(1.0 / gaps.min()))
        if n < 1 or np.max(np.abs(frac[:, j] * n - np.round(frac[:, j] * n))) > 1e-3:
            raise ImportProblem(file, "kpoints", "the k points form neither a labelled path nor a regular grid")
        shape.append(n)
    return tuple(shape)


def _dense_grid(band: BandData, ops: np.ndarray, time_reversal: bool, file: str):
    """Map k points to a full periodic grid, unfolding an irreducible set with the point group."""
    shape = _grid_shape(band.kpoints_frac, file)
    n = np.array(shape)
    index = np.full(shape, -1, dtype=np.int64)
    signs = (1, -1) if time_reversal else (1,)
    for w in ops:
        for s in signs:
            image = s * (band.kpoints_frac @ w)
            ijk = np.mod(np.round(image * n).astype(np.int64), n)
            free = index[ijk[:, 0], ijk[:, 1], ijk[:, 2]] < 0
            index[ijk[free, 0], ijk[free, 1], ijk[free, 2]] = np.flatnonzero(free)
        if np.all(index >= 0):
            break
    if np.any(index < 0):
        raise ImportProblem(file, "kpoints", f"the uniform grid {shape[0]}x{shape[1]}x{shape[2]} is incomplete: "
                            f"{int(np.sum(index < 0))} points missing even after unfolding with the point group")
    return shape, index


def find_extrema(band: BandData, frame: CalcFrame, edges: list[tuple[int, int]], ops: np.ndarray,
                 file: str) -> list[Extremum]:
    """Local maxima of the highest valence and minima of the lowest conduction band.

    Line mode: a k point (labelled points merged over the path) strictly above
    (valence) or below (conduction) its neighbours along the path. Grid mode: a
    grid point strictly above or below all its 8 (2D) or 26 (3D) neighbours on the
    periodic grid (a point level with an in-plane neighbour lies on a flat line,
    not at an isolated extremum; level with a neighbour along the layer normal, a
    band flat in k_z, is allowed).
    Every spin channel is searched. Labels follow the naming rule of the module
    docstring.
    """
    labels = kpoint_labels(band)
    fps = fingerprints(frame.k_inplane, frame.reciprocal_2d)
    out: list[Extremum] = []
    if band.line_mode:
        node, nbrs = _neighbours_line(band, labels)
        seg_of = np.full(len(labels), -1)
        segments = segments_from_labels(labels)
        for j, (a, b) in enumerate(segments):
            seg_of[a:b + 1] = j
        # every (node, neighbour) pair once per direction, as arrays
        pairs = np.array([(i, j) for i in range(len(nbrs)) for j in nbrs[i]], dtype=np.int64).reshape(-1, 2)
        src, dst = pairs[:, 0], pairs[:, 1]
        # level with a neighbour only along the normal (a band flat in k_z) still counts
        along_normal = np.linalg.norm(frame.k_layer[dst, :2] - frame.k_layer[src, :2], axis=1) < 1e-9
        has_nbr = np.bincount(src, minlength=len(labels)) > 0
        for spin, (vb, cb) in enumerate(edges):
            for kind, bi, sign in (("valence", vb, 1.0), ("conduction", cb, -1.0)):
                e = sign * band.energies_ev[spin, bi]
                ok = (e[src] > e[dst]) | (along_normal & (e[src] >= e[dst]))
                bad = np.bincount(src[~ok], minlength=len(labels)) > 0
                for i in np.flatnonzero(has_nbr & ~bad & (node == np.arange(len(labels)))):
                    out.append(Extremum(int(i), spin, kind, float(band.energies_ev[spin, bi, i]),
                                        _line_label(i, labels, segments, seg_of, frame.k_layer),
                                        labels[i] is not None, tuple(fps[i])))
        return out
    shape, index = _dense_grid(band, ops, not band.spin_polarized, file)
    offsets = [o for o in np.ndindex(3, 3, 3) if o != (1, 1, 1)]
    offsets = [np.array(o) - 1 for o in offsets]
    offsets = [o for o in offsets if all(o[j] == 0 or shape[j] > 1 for j in range(3))]
    # offsets purely along the layer normal: a neighbour level with the point there still counts
    step = (np.array(offsets) / np.array(shape)) @ band.reciprocal @ frame.rotation.T if offsets else np.zeros((0, 3))
    along_normal = np.linalg.norm(step[:, :2], axis=1) < 1e-9 * max(frame.reciprocal_constant, 1e-12)
    label_images = _label_images(band, ops, frame)
    for spin, (vb, cb) in enumerate(edges):
        for kind, bi, sign in (("valence", vb, 1.0), ("conduction", cb, -1.0)):
            e = sign * band.energies_ev[spin, bi][index]
            best = np.ones(shape, dtype=bool)
            for o, flat_ok in zip(offsets, along_normal):
                other = np.roll(e, shift=tuple(-o), axis=(0, 1, 2))
                best &= (e >= other) if flat_ok else (e > other)
            for ijk in zip(*np.nonzero(best)):
                i = int(index[ijk])
                label, on_label = _grid_label(frame.k_layer[i], label_images, frame)
                out.append(Extremum(i, spin, kind, float(band.energies_ev[spin, bi, i]), label, on_label,
                                    tuple(fps[i])))
    return out


def _line_label(i, labels, segments, seg_of, k_layer) -> str:
    if labels[i] is not None:
        return sanitize_label(labels[i])
    a, b = segments[seg_of[i]]
    start, end = labels[a], labels[b]
    total = np.linalg.norm(k_layer[b] - k_layer[a])
    pct = int(round(100.0 * np.linalg.norm(k_layer[i] - k_layer[a]) / total)) if total > 0 else 0
    return f"{sanitize_label(start or 'k')}-{sanitize_label(end or 'k')}_{pct}"[:24]


def _label_images(band: BandData, ops: np.ndarray, frame: CalcFrame) -> list[tuple[str, np.ndarray]]:
    """In-plane layer-frame positions of every image of every labelled point."""
    out = []
    for label, frac in band.labels.items():
        frac = np.asarray(frac, dtype=float)
        images = np.concatenate([frac @ ops, -(frac @ ops)])
        k = (images @ band.reciprocal) @ frame.rotation.T
        out.append((sanitize_label(label), k[:, :2]))
    return out


def _grid_label(k, label_images, frame: CalcFrame) -> tuple[str, bool]:
    b = frame.reciprocal_2d
    n = np.arange(-2, 3)
    g = np.array(np.meshgrid(n, n, indexing="ij")).reshape(2, -1).T @ b
    best, name = math.inf, "k"
    for label, pts in label_images:
        d = np.linalg.norm(k[None, None, :2] - pts[:, None, :] - g[None, :, :], axis=-1).min()
        if d < best:
            best, name = d, label
    if not label_images:
        best = float(fingerprints(k[None, :2], b)[0, 0])
    if best < FINGERPRINT_TOL * frame.reciprocal_constant:
        return name, True
    return f"{name}_{int(round(best * 100))}"[:24], False


# --------------------------------------------------------------------------- matching


@dataclass
class Valley:
    """One valley of a compound, matched across its calculations.

    ``members`` maps a calculation key ("1", "2", ..., "bulk") to the extremum
    found there (None where the band there has no extremum at this position).
    """

    label: str
    band: str
    fingerprint: tuple
    members: dict = field(default_factory=dict)


def _close(fp_a, fp_b, scale: float) -> bool:
    return bool(np.max(np.abs(np.asarray(fp_a) - np.asarray(fp_b))) < FINGERPRINT_TOL * scale)


def match_valleys(extrema: dict[str, list[Extremum]], scale: float) -> list[Valley]:
    """Group extrema into valleys across calculations (module docstring).

    Parameters
    ----------
    extrema : calculation key -> extrema, in layer-count order.
    scale : in-plane reciprocal lattice constant, 1/Angstrom (sets the tolerance).

    Within one calculation the extrema of one band at one position (symmetry
    images, other k_z, the other spin) merge into the best one (highest for
    valence, lowest for conduction).
    """
    positions: list[tuple[tuple, str]] = []  # fingerprint, label: one label per position
    valleys: list[Valley] = []
    for key, found in extrema.items():
        for ext in found:
            pos = next((p for p in positions if _close(p[0], ext.fingerprint, scale)), None)
            if pos is None:
                label = ext.label
                taken = {p[1] for p in positions}
                suffix = 2
                while label in taken:
                    label = f"{ext.label[:21]}_{suffix}"
                    suffix += 1
                pos = (ext.fingerprint, label)
                positions.append(pos)
            valley = next((v for v in valleys if v.label == pos[1] and v.band == ext.band), None)
            if valley is None:
                valley = Valley(pos[1], ext.band, pos[0])
                valleys.append(valley)
            old = valley.members.get(key)
            better = old is None or ((ext.energy_ev > old.energy_ev) if ext.band == "valence"
                                     else (ext.energy_ev < old.energy_ev))
            if better:
                valley.members[key] = ext
    return valleys


def band_energy_at(fingerprint, band_kind: str, band: BandData, frame: CalcFrame,
                   edges: list[tuple[int, int]], scale: float) -> tuple[float, int, int] | None:
    """Best energy of the edge band over the k points at a position (eV), its k index and spin; None if unsampled."""
    fps = fingerprints(frame.k_inplane, frame.reciprocal_2d)
    hit = np.flatnonzero(np.max(np.abs(fps - np.asarray(fingerprint)), axis=1) < FINGERPRINT_TOL * scale)
    if not hit.size:
        return None
    best = None
    for spin, (vb, cb) in enumerate(edges):
        e = band.energies_ev[spin, vb if band_kind == "valence" else cb, hit]
        j = int(np.argmax(e) if band_kind == "valence" else np.argmin(e))
        cand = (float(e[j]), int(hit[j]), spin)
        if best is None or (cand[0] > best[0] if band_kind == "valence" else cand[0] < best[0]):
            best = cand
    return best


# --------------------------------------------------------------------------- masses


@dataclass(frozen=True, eq=False)
class ValleyFit:
    """Band samples of one valley (layer frame, relative to the extremum) and their mass fit.

    ``fit`` is the :class:`lamellume.bandfit.MassFit` or None when the samples
    leave part of the in-plane tensor undetermined; ``constraints`` says what
    fixes the tensor (path directions, symmetry) and, when undetermined, which
    combination is free.
    """

    k_inplane: np.ndarray
    energies_ev: np.ndarray
    at_origin: bool
    fit: object
    constraints: str
    n_symmetry: int
    symmetric: bool = False


def little_group_2d(k_frac: np.ndarray, ops: np.ndarray, reciprocal: np.ndarray, rotation: np.ndarray,
                    time_reversal: bool) -> np.ndarray:
    """In-plane parts (layer frame, acting on row vectors) of the operations that leave k invariant.

    An operation W (fractional, real space) maps a row vector of fractional
    reciprocal coordinates k to k W; it belongs to the little group when
    k W = +-k modulo a reciprocal lattice vector (-: with time reversal) [1]_.
    Only operations that keep the layer plane are kept.
    """
    out = []
    b_inv = np.linalg.inv(reciprocal)
    signs = (1, -1) if time_reversal else (1,)
    for w in ops:
        for s in signs:
            image = s * (k_frac @ w)
            d = image - k_frac
            if np.max(np.abs(d - np.round(d))) > 1e-6:
                continue
            m = s * rotation @ (b_inv @ w @ reciprocal) @ rotation.T  # layer frame, row vectors
            if np.max(np.abs(m[:2, 2])) > 1e-6 or np.max(np.abs(m[2, :2])) > 1e-6:
                continue
            out.append(m[:2, :2])
    return np.unique(np.round(np.array(out), 10), axis=0) if out else np.eye(2)[None]


def valley_samples(band: BandData, frame: CalcFrame, ext: Extremum, edges, ops: np.ndarray,
                   radius: float, bulk: bool) -> tuple[np.ndarray, np.ndarray, list[str], int]:
    """k points around an extremum and the edge band there, with their little-group images.

    Returns in-plane k relative to the extremum (layer frame, 1/Angstrom),
    energies (eV), the directions sampled (for the report) and the in-plane parts
    of the little-group operations (n, 2, 2). A slab has no dispersion along the normal, so its k
    are projected on the plane; for bulk only samples in the plane of the
    extremum (|dk_z| < 1e-6 1/Angstrom) are used.
    """
    vb, cb = edges[ext.spin]
    e_all = band.energies_ev[ext.spin, vb if ext.band == "valence" else cb]
    k0 = frame.k_layer[ext.index]
    dk = frame.k_layer - k0
    labels = kpoint_labels(band)
    directions: list[str] = []
    if band.line_mode:
        node, _ = _neighbours_line(band, labels)
        segments = segments_from_labels(labels)
        chosen = set()
        for start, end in segments:
            for occ in np.flatnonzero(node[start:end + 1] == node[ext.index]) + start:
                for step in (-1, 1):
                    j = occ + step
                    walked = False
                    while start <= j <= end and np.linalg.norm(dk[j, :2]) <= radius:
                        if node[j] != node[ext.index]:
                            chosen.add(int(j))
                            walked = True
                        j += step
                    if walked:
                        far = end if step > 0 else start
                        directions.append(f"{ext.label}->{sanitize_label(labels[far] or 'k')}")
        pick = np.array(sorted(chosen), dtype=int)
    else:
        near = np.linalg.norm(dk[:, :2], axis=1) <= radius
        pick = np.flatnonzero(near & (np.arange(len(dk)) != ext.index))
        directions.append("uniform grid")
    if bulk:
        pick = pick[np.abs(dk[pick, 2]) < 1e-6]
    k = np.concatenate([[np.zeros(2)], dk[pick, :2]])
    e = np.concatenate([[e_all[ext.index]], e_all[pick]])
    group = little_group_2d(band.kpoints_frac[ext.index], ops, band.reciprocal, frame.rotation,
                            not band.spin_polarized)
    k_all = np.concatenate([k @ m for m in group])
    e_all2 = np.tile(e, len(group))
    _, keep = np.unique(np.round(k_all, 9), axis=0, return_index=True)
    keep = np.sort(keep)
    return k_all[keep], e_all2[keep], sorted(set(directions)), group


def _constraint_text(k: np.ndarray, directions: list[str], n_group: int) -> tuple[int, str]:
    """Rank of the in-plane curvature constraints and a sentence saying what fixes them."""
    nz = k[np.linalg.norm(k, axis=1) > 0]
    if not len(nz):
        return 0, "no neighbouring k points within the fit radius"
    u = nz / np.linalg.norm(nz, axis=1)[:, None]
    rows = np.c_[u[:, 0] ** 2, 2 * u[:, 0] * u[:, 1], u[:, 1] ** 2]
    _, s, vt = np.linalg.svd(rows)
    rank = int(np.sum(s > 1e-8 * s[0]))
    by = ("the uniform-grid samples around the point" if directions == ["uniform grid"]
          else f"samples along {', '.join(directions)}")
    by += f" and their images under the {n_group}-element little group of the point" if n_group > 1 else \
        " (no symmetry adds directions)"
    if rank == 3:
        return 3, f"all three in-plane components fixed by {by}"
    free = vt[rank:]
    desc = "; ".join("{:+.2f} W_xx {:+.2f} W_xy {:+.2f} W_yy".format(*v) for v in free)
    return rank, f"only {rank} of 3 in-plane components fixed by {by}; unconstrained: {desc}"


def _tensor_action(m: np.ndarray) -> np.ndarray:
    """Linear map of (W_xx, W_xy, W_yy) under W -> M W M^T (the energy E(k M) = E(k) condition)."""
    out = np.empty((3, 3))
    for j, basis in enumerate((np.array([[1.0, 0.0], [0.0, 0.0]]), np.array([[0.0, 1.0], [1.0, 0.0]]),
                               np.array([[0.0, 0.0], [0.0, 1.0]]))):
        t = m @ basis @ m.T
        out[:, j] = (t[0, 0], t[0, 1], t[1, 1])
    return out


def invariant_tensors(group: np.ndarray) -> np.ndarray:
    """Basis (columns, in (W_xx, W_xy, W_yy)) of the symmetric 2x2 tensors invariant under a point group.

    3 columns without symmetry or with a 2-fold axis only, 2 with a mirror (principal
    axes fixed), 1 with a 3-, 4- or 6-fold axis (isotropic) [1]_.
    """
    projector = np.mean([_tensor_action(m) for m in group], axis=0)
    u, sv, _ = np.linalg.svd(projector)
    return u[:, sv > 0.5]


def _symmetric_fit(k: np.ndarray, e: np.ndarray, band_kind: str, basis: np.ndarray):
    """Least-squares fit E = E0 + C k^T W k with W restricted to the invariant tensors (extremum at k = 0)."""
    from lamellume.units import HBAR2_OVER_2ME_EV_A2

    quad = HBAR2_OVER_2ME_EV_A2 * np.c_[k[:, 0] ** 2, 2 * k[:, 0] * k[:, 1], k[:, 1] ** 2]
    a = np.c_[np.ones(len(k)), quad @ basis]
    coef, *_ = np.linalg.lstsq(a, e, rcond=None)
    w3 = basis @ coef[1:]
    w = np.array([[w3[0], w3[1]], [w3[1], w3[2]]])
    inv = w if band_kind == "conduction" else -w
    lam, vec = np.linalg.eigh(inv)
    if lam[0] <= 0:
        raise bandfit.MassFitError("curvature has the wrong sign or a flat direction")
    v = vec[:, 1]
    angle = float(np.degrees(np.arctan2(v[1], v[0])))
    angle = angle - 180.0 if angle > 90.0 else angle + 180.0 if angle <= -90.0 else angle
    if np.isclose(lam[0], lam[1], rtol=1e-9):
        angle = 0.0
    rms = float(np.sqrt(np.mean((e - a @ coef) ** 2)))
    return bandfit.MassFit(band=band_kind, inverse_mass_tensor=inv, masses_me=(float(1 / lam[1]), float(1 / lam[0])),
                           angle_deg=angle, k0=np.zeros(2), e0_ev=float(coef[0]), rms_residual_ev=rms,
                           nonparabolic=False, quartic_fraction=math.nan, rms_residual_quartic_ev=math.nan,
                           n_points=len(k), warnings=("fitted with the little-group symmetry imposed",))


def fit_valley(k: np.ndarray, e: np.ndarray, band_kind: str, at_origin: bool, directions: list[str],
               n_group: int, group: np.ndarray | None = None) -> ValleyFit:
    """Fit the in-plane mass tensor of one valley.

    When the samples (with their little-group images) span all three in-plane
    components, the fit is :func:`lamellume.bandfit.fit_effective_mass` (the
    screen's band-sample fit; ``at_origin`` pins the extremum at k = 0 for
    labelled points and path points, where the extremum is a sample). When they
    do not, but the little group fixes the missing combination (e.g. a mirror
    through the point fixes the principal axes, so samples along the two mirror
    directions suffice), the tensor is fitted within the symmetry-invariant
    tensors and ``symmetric`` is True. Otherwise ``fit`` is None and
    ``constraints`` says which combination is free.
    """
    rank, text = _constraint_text(k, directions, n_group)
    if rank == 3:
        try:
            fit = bandfit.fit_effective_mass(k, e, band_kind, fix_k0=at_origin)
        except bandfit.MassFitError as exc:
            if not at_origin and "degenerate" in str(exc):
                fit = bandfit.fit_effective_mass(k, e, band_kind, fix_k0=True)
            else:
                return ValleyFit(k, e, at_origin, None, f"{text}; fit failed: {exc}", n_group)
        return ValleyFit(k, e, at_origin, fit, text, n_group)
    if group is not None and len(k) > 1:
        basis = invariant_tensors(group)
        nz = k[np.linalg.norm(k, axis=1) > 0]
        u = nz / np.linalg.norm(nz, axis=1)[:, None]
        rows = np.c_[u[:, 0] ** 2, 2 * u[:, 0] * u[:, 1], u[:, 1] ** 2] @ basis
        sv = np.linalg.svd(rows, compute_uv=False)
        if int(np.sum(sv > 1e-8 * sv[0])) == basis.shape[1]:
            try:
                fit = _symmetric_fit(k, e, band_kind, basis)
            except bandfit.MassFitError as exc:
                return ValleyFit(k, e, at_origin, None, f"{text}; fit failed: {exc}", n_group)
            text = (f"{rank} of 3 in-plane components fixed by the samples ({', '.join(directions)}); the "
                    f"{n_group}-element little group leaves {basis.shape[1]} independent components, all fixed "
                    "(fitted with the symmetry imposed)")
            return ValleyFit(k, e, at_origin, fit, text, n_group, symmetric=True)
    return ValleyFit(k, e, at_origin, None, text, n_group)


def directional_curvatures(k: np.ndarray, e: np.ndarray, band_kind: str) -> float:
    """Mean carrier inverse mass (1/m_e) along the sampled directions (parabola through k = 0 per point).

    Used only for the documented isotropic fallback of an undetermined valley.
    """
    from lamellume.units import HBAR2_OVER_2ME_EV_A2

    r2 = np.sum(k**2, axis=1)
    nz = r2 > 0
    sign = 1.0 if band_kind == "conduction" else -1.0
    e0 = e[~nz][0] if np.any(~nz) else e.min() if band_kind == "conduction" else e.max()
    return float(np.mean(sign * (e[nz] - e0) / (HBAR2_OVER_2ME_EV_A2 * r2[nz])))


# --------------------------------------------------------------------------- energy reference


def vacuum_level_from_profile(potential_ev: np.ndarray, spacing_angstrom: float, *,
                              flat_ev: float = 0.01, min_width_angstrom: float = 3.0) -> float:
    """Vacuum level from a planar-averaged local potential along the layer normal.

    The vacuum level is the mean of the potential over the points within
    ``flat_ev`` of its maximum, provided those points form a plateau at least
    ``min_width_angstrom`` wide (periodic profile). A profile without such a
    plateau (e.g. a bulk calculation) has no vacuum and raises.

    Parameters
    ----------
    potential_ev : ndarray (n,)
        Planar average of the local (electrostatic) potential energy of an
        electron, eV, on a uniform grid along one cell axis.
    spacing_angstrom : float
        Grid spacing along that axis, Angstrom.

    Raises
    ------
    ValueError
        No vacuum plateau.
    """
    v = np.asarray(potential_ev, dtype=float)
    top = v.max()
    flat = v >= top - flat_ev
    # longest periodic run of plateau points
    run = best = 0
    for x in np.r_[flat, flat]:
        run = run + 1 if x else 0
        best = max(best, run)
    width = min(best, len(v)) * spacing_angstrom
    if width < min_width_angstrom:
        raise ValueError(f"no vacuum plateau: the planar-averaged potential stays within {flat_ev * 1000:.0f} meV "
                         f"of its maximum over only {width:.2f} A (< {min_width_angstrom:.1f} A)")
    return float(v[flat].mean())


def common_reference(references: dict[str, float | None], file_of: dict[str, str]) -> dict[str, float]:
    """Check that every calculation has a vacuum level; return them.

    A compound whose layer counts cannot all be put on the vacuum level is
    rejected with the reason; nothing is guessed.
    """
    missing = [k for k, v in references.items() if v is None]
    if missing:
        have = [k for k, v in references.items() if v is not None]
        key = missing[0]
        hint = (" (a bulk calculation has no vacuum of its own: give its vacuum level on the same scale, "
                "e.g. from a slab alignment, as vacuum_level_ev)") if key == "bulk" else ""
        others = f"; layer counts {', '.join(have)} are on the vacuum level" if have else ""
        raise ImportProblem(file_of[key], f"calculations[{key}].vacuum_level_ev",
                            f"no energy reference for layer count {key}{others}: the layer counts cannot be put "
                            f"on one reference{hint}")
    return {k: float(v) for k, v in references.items()}


# --------------------------------------------------------------------------- one compound

#: Record format written by the import (the screen's input contract).
RECORD_FORMAT = "lamellume-record/1"
#: Relative disagreement of in-plane lattice constants across layer counts that rejects a compound.
LATTICE_RTOL = 0.02


@dataclass(frozen=True, eq=False)
class Calculation:
    """One calculation of a compound, read (see :mod:`lamellume.calcio`).

    ``key`` is the layer count ("1", "2", ..., "bulk"); ``file`` the band-structure
    file (campaign-relative, for messages); ``structure`` a pymatgen Structure;
    ``geometry`` its :class:`lamellume.structure.LayerGeometry`; ``vacuum_ev``
    the vacuum level on the file's energy scale (None: not given);
    ``structure_source`` where the structure came from.
    """

    key: str
    file: str
    band: BandData
    structure: object
    geometry: object
    vacuum_ev: float | None
    structure_source: str = "embedded"


@dataclass(frozen=True, eq=False)
class Dielectric:
    """Dielectric tensors as read: 3x3 arrays, their frame ("layer" or "crystal") and the
    calculation whose Cartesian frame "crystal" refers to."""

    electronic: np.ndarray
    static: np.ndarray | None
    frame: str
    calculation: str
    file: str


@dataclass
class ImportResult:
    """A record of the input contract plus a per-valley report of the import."""

    record: dict
    report: list[dict]
    warnings: list[str]


def layer_key_order(key: str) -> tuple[int, int]:
    """Sort key of layer counts: 1, 2, ..., then bulk."""
    return (1, 0) if key == "bulk" else (0, int(key))


def _check_consistency(calcs: dict[str, Calculation], description_file: str) -> None:
    missing = [k for k in ("1", "bulk") if k not in calcs]
    if missing:
        raise ImportProblem(description_file, "calculations",
                            f"missing layer count {' and '.join(missing)}: a compound needs a monolayer (1) and a "
                            "bulk calculation")
    spins = {k: c.band.spin_polarized for k, c in calcs.items()}
    if len(set(spins.values())) > 1:
        pol = [k for k, v in spins.items() if v]
        unpol = [k for k, v in spins.items() if not v]
        odd = next(c for k, c in calcs.items() if spins[k] != spins["1"])  # differs from the monolayer
        raise ImportProblem(odd.file, "bands", f"spin mismatch across layer counts: {', '.join(pol)} spin-polarised, "
                            f"{', '.join(unpol)} not; edges of one compound must come from one kind of calculation")
    bulk = calcs["bulk"]
    for key, c in calcs.items():
        if c.geometry.layer_normal is None or not c.geometry.is_layered:
            raise ImportProblem(c.file, "structure", f"the {c.structure_source} structure of layer count {key} shows "
                                f"no 2D-bonded layers (dimensionality {c.geometry.dimensionality}); no layer frame")
        if c.geometry.formula != bulk.geometry.formula:
            raise ImportProblem(c.file, "structure", f"inconsistent structures across layer counts: formula "
                                f"{c.geometry.formula} at {key} but {bulk.geometry.formula} in bulk")


def _frames(calcs: dict[str, Calculation]) -> dict[str, CalcFrame]:
    frames = {}
    for key, c in calcs.items():
        try:
            frames[key] = layer_frame(c.band, np.asarray(c.structure.lattice.matrix), c.geometry.layer_normal)
        except ValueError as exc:
            raise ImportProblem(c.file, "structure", f"layer frame: {exc}") from None
    ref = inplane_lattice_constant(frames["bulk"].reciprocal_2d)
    for key, f in frames.items():
        a = inplane_lattice_constant(f.reciprocal_2d)
        if abs(a - ref) > LATTICE_RTOL * ref:
            raise ImportProblem(calcs[key].file, "structure", f"inconsistent structures across layer counts: in-plane "
                                f"lattice constant {a:.4f} A at {key} but {ref:.4f} A in bulk (> {LATTICE_RTOL:.0%})")
    return frames


def import_compound(ident: str, description: dict, description_file: str, calcs: dict[str, Calculation],
                    dielectric: Dielectric, spacing_angstrom: float, lattice_angstrom: float,
                    sources: dict[str, str]) -> ImportResult:
    """Turn the calculations of one compound into a record of the input contract.

    Parameters
    ----------
    ident : compound identifier (the record's ``id``).
    description : the validated description (options: ``masses_from``,
        ``valley_window_ev``, ``fit_radius_per_angstrom``, ``undetermined_mass``,
        pass-through fields).
    description_file : its campaign-relative path (for messages).
    calcs : layer count -> calculation.
    dielectric : tensors and their frame.
    spacing_angstrom, lattice_angstrom : layer geometry of the compound's structure (Angstrom).
    sources : campaign-relative path -> SHA-256 of every file read.

    Raises
    ------
    ImportProblem
        Anything that prevents an honest record (file, field, reason).
    """
    calcs = dict(sorted(calcs.items(), key=lambda kv: layer_key_order(kv[0])))
    _check_consistency(calcs, description_file)
    frames = _frames(calcs)
    vacuum = common_reference({k: c.vacuum_ev for k, c in calcs.items()}, {k: c.file for k, c in calcs.items()})
    ops = {k: point_operations(c.structure) for k, c in calcs.items()}
    edges, extrema = {}, {}
    for key, c in calcs.items():
        edges[key] = band_edges(c.band.energies_ev, c.band.efermi_ev, c.file)
        extrema[key] = find_extrema(c.band, frames[key], edges[key], ops[key], c.file)
    scale = frames["1"].reciprocal_constant
    valleys = match_valleys(extrema, scale)

    warnings: list[str] = []
    window = float(description.get("valley_window_ev", 0.5))
    # Band edges of every calculation on the vacuum level.
    vbm = {k: max(e.energy_ev for e in extrema[k] if e.band == "valence") - vacuum[k] for k in calcs}
    cbm = {k: min(e.energy_ev for e in extrema[k] if e.band == "conduction") - vacuum[k] for k in calcs}
    rows = []
    for v in valleys:
        edge, as_extremum = {}, {}
        for key, c in calcs.items():
            ext = v.members.get(key)
            if ext is not None:
                edge[key], as_extremum[key] = ext.energy_ev - vacuum[key], True
                continue
            found = band_energy_at(v.fingerprint, v.band, c.band, frames[key], edges[key], scale)
            if found is not None:
                edge[key], as_extremum[key] = found[0] - vacuum[key], False
        near = [k for k in edge if as_extremum[k] and (edge[k] >= vbm[k] - window if v.band == "valence"
                                                       else edge[k] <= cbm[k] + window)]
        if not near:
            continue
        rows.append((v, edge, as_extremum))
    # Drop valleys that lack a required layer count unless they are a band edge somewhere.
    kept = []
    for v, edge, as_extremum in rows:
        lacking = [k for k in ("1", "bulk") if k not in edge]
        if lacking:
            is_edge = any(abs(edge[k] - (vbm[k] if v.band == "valence" else cbm[k])) < 1e-9 for k in edge)
            file = calcs[lacking[0]].file
            if is_edge:
                raise ImportProblem(file, "kpoints", f"{v.band} valley {v.label} (a band edge) is not sampled in "
                                    f"layer count {lacking[0]}: its edge there is unknown")
            warnings.append(f"{v.band} valley {v.label} dropped: not sampled in layer count {lacking[0]} ({file})")
            continue
        kept.append((v, edge, as_extremum))
    if not any(v.band == "valence" for v, _, _ in kept) or not any(v.band == "conduction" for v, _, _ in kept):
        raise ImportProblem(description_file, "valleys", "no valence or no conduction valley found")
    if len(kept) > 32:
        raise ImportProblem(description_file, "valley_window_ev", f"{len(kept)} valleys within the window; the record "
                            "holds at most 32: lower valley_window_ev")

    masses_from = str(description.get("masses_from", "1"))
    if masses_from not in calcs:
        raise ImportProblem(description_file, "masses_from", f"layer count {masses_from} has no calculation")
    radius = float(description.get("fit_radius_per_angstrom", 0.06))
    fallback = description.get("undetermined_mass", "reject")
    order = [masses_from] + [k for k in calcs if k != masses_from]
    out_valleys, report = [], []
    for v, edge, as_extremum in kept:
        chosen, first_failure = None, None
        notes = []
        for key in order:
            ext = v.members.get(key)
            if ext is None:
                continue
            c = calcs[key]
            k, e, directions, group = valley_samples(c.band, frames[key], ext, edges[key], ops[key], radius,
                                                     bulk=(key == "bulk"))
            vf = fit_valley(k, e, v.band, at_origin=c.band.line_mode or ext.labelled,
                            directions=directions, n_group=len(group), group=group)
            if vf.fit is not None:
                chosen = (key, vf)
                break
            notes.append(f"{key}: {vf.constraints}")
            first_failure = first_failure or (key, vf)
        entry = {"label": v.label, "band": v.band,
                 "edge_ev": {k: edge[k] for k in sorted(edge, key=layer_key_order)}}
        if "edge_uncertainty_ev" in description:
            entry["edge_uncertainty_ev"] = description["edge_uncertainty_ev"]
        info = {"label": v.label, "band": v.band, "extremum_in": ",".join(k for k in edge if as_extremum[k])}
        if chosen is not None:
            key, vf = chosen
            if key != masses_from:
                warnings.append(f"{v.band} valley {v.label}: mass from layer count {key} "
                                f"({'; '.join(notes) or 'no extremum in ' + masses_from})")
            fit = vf.fit
            if vf.symmetric:  # the screen's fit cannot impose the symmetry: hand over the tensor
                mass = np.linalg.inv(np.asarray(fit.inverse_mass_tensor))
                entry["mass"] = {"tensor_me": [[float(x) for x in row] for row in 0.5 * (mass + mass.T)]}
            else:
                entry["band_samples"] = {"k_per_angstrom": vf.k_inplane[:400].tolist(),
                                         "energy_ev": vf.energies_ev[:400].tolist(),
                                         "extremum_at_origin": bool(vf.at_origin)}
            if fit.nonparabolic:
                warnings.append(f"{v.band} valley {v.label}: non-parabolic within the fit radius "
                                f"(quartic fraction {fit.quartic_fraction:.2f}); mass describes the band bottom")
            info.update({"mass_from": key, "masses_me": list(fit.masses_me), "angle_deg": fit.angle_deg,
                         "fit_rms_ev": fit.rms_residual_ev, "nonparabolic": bool(fit.nonparabolic),
                         "n_points": fit.n_points, "constraints": vf.constraints})
        elif notes and all(_NOT_EXTREMUM.search(n) for n in notes):
            # an extremum along the path or grid stencil that the fit shows to be a saddle point or
            # flat in the plane: not a valley, unless it is a band edge (then the true edge is elsewhere)
            is_edge = any(abs(edge[k] - (vbm[k] if v.band == "valence" else cbm[k])) < 1e-9 for k in edge)
            key = (first_failure or (masses_from, None))[0]
            if is_edge:
                raise ImportProblem(calcs[key].file, f"valleys[{v.label}].mass",
                                    f"{v.band} band edge at {v.label} is not an extremum in the plane "
                                    f"({'; '.join(notes)}): the true band edge lies off the sampled k points")
            warnings.append(f"{v.band} valley {v.label} dropped: a saddle point or flat in the plane, not an extremum")
            continue
        else:
            key, vf = first_failure or (masses_from, None)
            reason = "; ".join(notes) or "no extremum in any layer count"
            if fallback != "isotropic" or vf is None or not len(vf.k_inplane) > 1:
                raise ImportProblem(calcs[key].file, f"valleys[{v.label}].mass",
                                    f"{v.band} valley {v.label}: the in-plane mass tensor is not determined ({reason}); "
                                    "add a uniform-grid calculation or set undetermined_mass to 'isotropic'")
            inv = directional_curvatures(vf.k_inplane, vf.energies_ev, v.band)
            if not inv > 0:
                raise ImportProblem(calcs[key].file, f"valleys[{v.label}].mass",
                                    f"{v.band} valley {v.label}: curvature along the path has the wrong sign")
            entry["mass"] = {"isotropic_me": 1.0 / inv}
            warnings.append(f"{v.band} valley {v.label}: isotropic mass assumed from the path directions ({reason})")
            info.update({"mass_from": key, "masses_me": [1.0 / inv, 1.0 / inv], "angle_deg": 0.0,
                         "fit_rms_ev": math.nan, "nonparabolic": False, "n_points": len(vf.k_inplane),
                         "constraints": vf.constraints + " (isotropic assumed)"})
        out_valleys.append(entry)
        report.append(info)

    diel = _dielectric_layer(dielectric, calcs, frames)
    formula = description.get("formula", calcs["bulk"].geometry.formula)
    files = ", ".join(f"{k}={calcs[k].file}" for k in calcs)
    provenance = (f"imported from {description_file} ({files}); energies on the vacuum level; "
                  f"masses fitted from band samples (layer frame); structure: {calcs['bulk'].structure_source}")
    if description.get("provenance"):
        provenance = f"{description['provenance']}; {provenance}"
    record = {
        "record_format": RECORD_FORMAT,
        "id": ident,
        "formula": formula,
        "provenance": provenance[:2000],
        "energy_reference": "vacuum level",
        "layer_spacing_angstrom": float(spacing_angstrom),
        "inplane_lattice_angstrom": float(lattice_angstrom),
        "dielectric": diel,
        "valleys": out_valleys,
        "sources": dict(sorted(sources.items())),
    }
    for name in ("scissor_ev", "scissor_uncertainty_ev", "monolayer_screening"):
        if name in description:
            record[name] = description[name]
    if "dielectric_relative_uncertainty" in description:
        diel["relative_uncertainty"] = description["dielectric_relative_uncertainty"]
    return ImportResult(record, report, warnings)


def _dielectric_layer(d: Dielectric, calcs: dict[str, Calculation], frames: dict[str, CalcFrame]) -> dict:
    """Dielectric tensors in the record's layer frame."""
    out = {"frame": "layer"}
    if d.frame == "layer":
        rot = np.eye(3)
    else:
        if d.calculation not in frames:
            raise ImportProblem(d.file, "calculation", f"layer count {d.calculation} (the frame of the tensor) has "
                                "no calculation")
        rot = frames[d.calculation].rotation
    for name, t in (("electronic", d.electronic), ("static", d.static)):
        if t is not None:
            tl = rot @ np.asarray(t, dtype=float) @ rot.T
            tl = 0.5 * (tl + tl.T)
            out[name] = [[float(x) for x in row] for row in tl]
    return out


def slab_normal(lattice_matrix: np.ndarray, frac_coords: np.ndarray, min_vacuum_angstrom: float = 5.0):
    """Layer normal of a slab cell: the reciprocal direction of the cell axis with the widest vacuum.

    For each cell axis i the atoms' fractional coordinates along i leave a
    largest periodic gap g_i; the vacuum width is g_i d_i (d_i the spacing of
    the lattice planes normal to b_i). The axis with the widest vacuum is the
    stacking direction and b_i / |b_i| the normal (sign: largest component
    positive). Used for the N-layer slabs (N >= 2) of a compound, whose bulk
    and monolayer go through the full layer analysis (:mod:`lamellume.structure`).

    Returns
    -------
    normal : ndarray (3,)
    vacuum_angstrom : float

    Raises
    ------
    ValueError
        No axis with at least ``min_vacuum_angstrom`` of vacuum (not a slab).
    """
    lat = np.asarray(lattice_matrix, dtype=float)
    rec = 2.0 * np.pi * np.linalg.inv(lat).T
    f = np.mod(np.asarray(frac_coords, dtype=float), 1.0)
    best, axis = -1.0, 0
    for i in range(3):
        x = np.sort(f[:, i])
        gaps = np.diff(np.r_[x, x[0] + 1.0])
        width = float(gaps.max()) * 2.0 * np.pi / np.linalg.norm(rec[i])
        if width > best:
            best, axis = width, i
    if best < min_vacuum_angstrom:
        raise ValueError(f"no vacuum layer: the widest empty region along a cell axis is {best:.2f} A "
                         f"(< {min_vacuum_angstrom:.0f} A), so this cell is no slab")
    n = rec[axis] / np.linalg.norm(rec[axis])
    return (n if n[np.argmax(np.abs(n))] > 0 else -n), best
