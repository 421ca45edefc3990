"""File formats of the import stage: calculation sets, pymatgen band structures,
local potentials, dielectric tensors.

Everything here reads a file and returns plain arrays or pymatgen objects for
:mod:`lamellume.calculations`; every failure is an
:class:`~lamellume.calculations.ImportProblem` naming the file, the field and
the reason. Paths in messages are campaign-relative.

Band structures are read from the JSON that pymatgen writes for its
``BandStructureSymmLine`` (labelled path) and ``BandStructure`` (k-point set,
e.g. a uniform grid) objects (``as_dict`` / ``monty.serialization.dumpfn``):
the k points, the reciprocal lattice, the band energies per spin, the Fermi
level and the labels are taken from that dictionary as numpy arrays; the
embedded structure is rebuilt with ``Structure.from_dict``. The objects
themselves are not rebuilt: pymatgen's ``from_dict`` creates one Python object
per k point, which costs more than the whole import of a band structure
(``benchmarks/bench_import.py``). pymatgen embeds the structure only in band
structures that carry projections; without one a CIF must be named.
"""

from __future__ import annotations

import json
import math
from functools import lru_cache
from pathlib import Path

import numpy as np

from lamellume.calculations import SPIN_KEYS, BandData, ImportProblem

#: Band-structure classes of pymatgen accepted, and whether they are labelled paths.
BAND_CLASSES = {"BandStructureSymmLine": True, "LobsterBandStructureSymmLine": True, "BandStructure": False}
#: Calculation files larger than this are rejected before parsing (bytes).
MAX_CALC_BYTES = 200_000_000
#: The description file of a compound folder.
DESCRIPTION = "calcset.json"


def _load_json(path: Path, rel: str):
    from lamellume import io

    # regular files only, at most the limit read (a named pipe would block, /dev/zero never end)
    raw, reason, _ = io.read_limited(path, MAX_CALC_BYTES)
    if raw is None:
        raise ImportProblem(rel, "(file)", reason)
    try:
        return json.loads(raw.decode("utf-8"))
    except UnicodeDecodeError as exc:
        raise ImportProblem(rel, "(file)", f"not UTF-8 text (byte {exc.start})") from None
    except json.JSONDecodeError as exc:
        what = "truncated JSON" if exc.pos >= len(raw.rstrip()) - 1 else "invalid JSON"
        raise ImportProblem(rel, "(file)", f"{what} at line {exc.lineno} column {exc.colno}: {exc.msg}") from None
    except (OSError, ValueError, RecursionError) as exc:
        raise ImportProblem(rel, "(file)", f"cannot read: {exc}") from None


@lru_cache(maxsize=None)
def _validator(name: str):
    import jsonschema

    from lamellume import io

    schema = io.load_schema(name)
    return jsonschema.Draft202012Validator(schema)


def _field(path) -> str:
    out = ""
    for part in path:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out or "(top level)"


def validate(data, schema: str, rel: str) -> None:
    """Validate against a schema in workflow/schemas; the first error becomes an ImportProblem."""
    errors = sorted(_validator(schema).iter_errors(data), key=lambda e: (len(e.path), list(map(str, e.path))))
    if errors:
        err = errors[0]
        raise ImportProblem(rel, _field(err.absolute_path), err.message[:300])


def read_description(folder: Path, rel_folder: str) -> dict:
    """The validated calcset.json of a compound folder."""
    rel = f"{rel_folder}/{DESCRIPTION}"
    data = _load_json(folder / DESCRIPTION, rel)
    validate(data, "calcset.schema.json", rel)
    keys = [c["layers"] for c in data["calculations"]]
    for key in set(keys):
        if keys.count(key) > 1:
            raise ImportProblem(rel, "calculations", f"layer count {key} appears {keys.count(key)} times")
    return data


def band_data_from_dict(d, rel: str) -> tuple[BandData, dict | None]:
    """Arrays of a pymatgen band-structure dictionary, and its embedded structure dictionary (or None)."""
    if not isinstance(d, dict):
        raise ImportProblem(rel, "(top level)", "not a pymatgen band structure (a JSON object is expected)")
    cls = d.get("@class")
    if cls not in BAND_CLASSES:
        raise ImportProblem(rel, "@class", f"not a pymatgen band structure: @class is {cls!r}, expected one of "
                            f"{', '.join(BAND_CLASSES)}")
    for key in ("kpoints", "bands", "lattice_rec", "efermi", "labels_dict"):
        if key not in d:
            raise ImportProblem(rel, key, "missing")
    try:
        kpts = np.asarray(d["kpoints"], dtype=float)
        rec = np.asarray(d["lattice_rec"]["matrix"], dtype=float)
        efermi = float(d["efermi"])
    except (TypeError, ValueError, KeyError) as exc:
        raise ImportProblem(rel, "kpoints", f"k points, lattice_rec.matrix or efermi are not numeric ({exc})") from None
    if kpts.ndim != 2 or kpts.shape[1] != 3 or len(kpts) < 2:
        raise ImportProblem(rel, "kpoints", f"expected a list of k points with 3 fractional coordinates, got shape "
                            f"{kpts.shape}")
    if rec.shape != (3, 3) or not np.all(np.isfinite(rec)) or abs(np.linalg.det(rec)) < 1e-12:
        raise ImportProblem(rel, "lattice_rec", "not a 3x3 non-singular matrix")
    bands = d["bands"]
    if not isinstance(bands, dict) or not bands or set(bands) - set(SPIN_KEYS) or "1" not in bands:
        raise ImportProblem(rel, "bands", "expected energies under spin keys '1' (and '-1' if spin-polarised)")
    arrays = []
    for spin in [s for s in SPIN_KEYS if s in bands]:
        value = bands[spin]["data"] if isinstance(bands[spin], dict) else bands[spin]
        try:
            arr = np.asarray(value, dtype=float)
        except (TypeError, ValueError):
            raise ImportProblem(rel, f"bands.{spin}", "band energies are not a numeric band x k-point table") from None
        if arr.ndim != 2 or arr.shape[1] != len(kpts):
            raise ImportProblem(rel, f"bands.{spin}", f"expected {len(kpts)} energies per band, got shape {arr.shape}")
        arrays.append(arr)
    if len(arrays) == 2 and arrays[0].shape != arrays[1].shape:
        raise ImportProblem(rel, "bands.-1", "spin channels have different numbers of bands")
    energies = np.stack(arrays)
    if not np.all(np.isfinite(energies)) or not math.isfinite(efermi) or not np.all(np.isfinite(kpts)):
        raise ImportProblem(rel, "bands", "non-finite energies, k points or Fermi level")
    labels = {}
    raw_labels = d["labels_dict"] if isinstance(d["labels_dict"], dict) else {}
    for name, frac in raw_labels.items():
        try:
            labels[str(name).strip()] = np.asarray(frac, dtype=float).reshape(3)
        except (TypeError, ValueError):
            raise ImportProblem(rel, f"labels_dict.{name}", "not 3 fractional coordinates") from None
    line = BAND_CLASSES[cls]
    if line and not labels:
        raise ImportProblem(rel, "labels_dict", "a band-structure path without labelled k points: valleys cannot be "
                            "named or placed")
    structure = d.get("structure") if isinstance(d.get("structure"), dict) else None
    return BandData(kpts, rec, energies, efermi, labels, line), structure


def read_band_structure(path: Path, rel: str) -> tuple[BandData, dict | None]:
    """Read a pymatgen band-structure JSON file (see module docstring)."""
    return band_data_from_dict(_load_json(path, rel), rel)


def structure_from_dict(d: dict, rel: str):
    """A pymatgen Structure from its dictionary."""
    from pymatgen.core import Structure

    try:
        return Structure.from_dict(d)
    except Exception as exc:  # pymatgen raises many types
        raise ImportProblem(rel, "structure", f"embedded structure unreadable: {str(exc)[:200]}") from None


def read_cif_structure(path: Path, rel: str):
    """A pymatgen Structure from a CIF file (one structure)."""
    from lamellume import io
    from lamellume.structure import StructureError, _decode, _parse

    data, error = io.read_text_limited(path)
    if error:
        raise ImportProblem(rel, "(file)", error)
    try:
        return _parse(_decode(data), [])
    except StructureError as exc:
        raise ImportProblem(rel, "(file)", str(exc)) from None


def planar_average(path: Path, rel: str, normal) -> tuple[np.ndarray, float]:
    """Planar average of a local-potential file along the cell axis closest to the layer normal.

    Read with pymatgen's ``Locpot`` and ``get_average_along_axis``. Returns the
    profile (eV) and the spacing of its points along the normal (Angstrom).
    """
    import warnings

    from pymatgen.io.vasp.outputs import Locpot

    from lamellume import io

    problem = io.file_kind_problem(path)  # regular files only: pymatgen would block on a named pipe
    if problem:
        raise ImportProblem(rel, "(file)", problem)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            locpot = Locpot.from_file(str(path))
    except Exception as exc:
        raise ImportProblem(rel, "(file)", f"not a local-potential file pymatgen can read: {str(exc)[:200]}") from None
    rec = np.asarray(locpot.structure.lattice.reciprocal_lattice.matrix)
    n = np.asarray(normal, dtype=float) / np.linalg.norm(normal)
    cosines = np.abs(rec @ n) / np.linalg.norm(rec, axis=1)
    axis = int(np.argmax(cosines))
    profile = np.asarray(locpot.get_average_along_axis(axis), dtype=float)
    d_spacing = 2.0 * np.pi / np.linalg.norm(rec[axis])
    return profile, d_spacing / len(profile)


def read_dielectric(folder: Path, rel_folder: str, spec: dict) -> tuple[np.ndarray, np.ndarray | None, str, str]:
    """Electronic and static tensors, their frame and the file (campaign-relative)."""
    if "file" in spec:
        rel = f"{rel_folder}/{spec['file']}"
        data = _load_json(folder / spec["file"], rel)
        validate(data, "dielectric.schema.json", rel)
        static = np.asarray(data["static"], dtype=float) if "static" in data else None
        return np.asarray(data["electronic"], dtype=float), static, data["frame"], rel
    rel = f"{rel_folder}/{spec['outcar']}"
    path = folder / spec["outcar"]
    if not path.is_file():
        raise ImportProblem(rel, "(file)", "file not found")
    import warnings

    from pymatgen.io.vasp.outputs import Outcar

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            outcar = Outcar(str(path))
            outcar.read_lepsilon()
    except Exception as exc:
        raise ImportProblem(rel, "(file)", f"not an OUTCAR pymatgen can read: {str(exc)[:200]}") from None
    eps = np.asarray(getattr(outcar, "dielectric_tensor", None) or np.zeros((3, 3)), dtype=float)
    if eps.shape != (3, 3) or not np.any(eps):
        raise ImportProblem(rel, "dielectric_tensor", "no MACROSCOPIC STATIC DIELECTRIC TENSOR (LEPSILON) block")
    static = None
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            outcar.read_lepsilon_ionic()
        ionic = np.asarray(outcar.dielectric_ionic_tensor, dtype=float)
        if ionic.shape == (3, 3) and np.any(ionic):
            static = eps + ionic
    except Exception:  # no ionic block: the static tensor stays unknown
        static = None
    return eps, static, "crystal", rel


def sha256_file(path: Path) -> str:
    """Hex SHA-256 of a file's bytes."""
    import hashlib

    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()
