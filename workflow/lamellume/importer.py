"""Orchestration of the import stage: compound folders in, records and rejects out.

For each compound folder ``<campaign>/calculations/<id>/`` this layer reads the
description and the files it names (:mod:`lamellume.calcio`), analyses the
structures (:mod:`lamellume.structure`), calls
:func:`lamellume.calculations.import_compound` and writes the record, a
record of the screen's input contract, to ``<out>/<id>.json``. A compound that
cannot be imported gives reject rows (file, field, reason) and no record; the
others carry on.

Per-compound cache: the key of a compound is a hash of its description, of
every file it reads (SHA-256 of their bytes) and of the import code; a job
re-imports only compounds whose key changed (a revised calculation re-imports
its compound alone) and copies the others from the cache.
"""

from __future__ import annotations

import logging
import re
import os
from pathlib import Path
from typing import Mapping, Sequence

from typing import TYPE_CHECKING

from lamellume import io, provenance

if TYPE_CHECKING:  # numpy, scipy and pymatgen load only when a job imports (the Snakefile imports this module)
    from lamellume.calculations import ImportProblem, ImportResult

log = logging.getLogger("lamellume")

#: Stage name of import rejects in the rejects table.
STAGE = "import"
#: Columns of the rejects table (those of lamellume.pipeline.REJECT_COLUMNS; a test keeps them equal,
#: so the import job need not load the screen's modules).
REJECT_COLUMNS = ["entry_id", "source_file", "field", "reason", "stage", "input_hash", "physics_hash", "code_version"]


def _sources(folder: Path, rel_folder: str, description: dict) -> dict[str, str]:
    """Campaign-relative path -> SHA-256 of the description and every file it names."""
    from lamellume import calcio
    from lamellume.calculations import ImportProblem

    names = [calcio.DESCRIPTION]
    for c in description["calculations"]:
        names += [c[k] for k in ("bands", "structure_file", "local_potential") if k in c]
    names += [description["dielectric"][k] for k in ("file", "outcar") if k in description["dielectric"]]
    out = {}
    for name in dict.fromkeys(names):
        path = folder / name
        rel = f"{rel_folder}/{name}"
        if not path.is_file():
            raise ImportProblem(rel, "(file)", "file not found")
        out[rel] = calcio.sha256_file(path)
    return out


def _geometry(structure, rel: str, memo: dict):
    """Layer geometry of a structure (memoised by content), with the covalent-radii bonding
    criterion of :mod:`lamellume.structure` (the same layers as CrystalNN on every test
    structure, several times faster: the import analyses one structure per calculation)."""
    from lamellume import structure as structure_mod
    from lamellume.calculations import ImportProblem

    key = io.sha256_bytes(structure.lattice.matrix.tobytes() + structure.frac_coords.tobytes()
                          + " ".join(map(str, structure.species)).encode())
    if key not in memo:
        try:
            memo[key] = (structure_mod.analyse_structure(structure, bonding="covalent_radii"), None)
        except structure_mod.StructureError as exc:
            memo[key] = (None, str(exc))
    geometry, error = memo[key]
    if error:
        raise ImportProblem(rel, "structure", error)
    return geometry


def _slab_geometry(structure, rel: str):
    """Layer geometry of an N-layer slab from its vacuum (calculations.slab_normal)."""
    from lamellume.calculations import ImportProblem, slab_normal
    from lamellume.structure import LayerGeometry

    try:
        normal, vacuum = slab_normal(structure.lattice.matrix, structure.frac_coords)
    except ValueError as exc:
        raise ImportProblem(rel, "structure", str(exc)) from None
    return LayerGeometry(formula=structure.composition.reduced_formula, is_layered=True, dimensionality=2,
                         layer_normal=tuple(float(x) for x in normal), repeat_distance_angstrom=None,
                         layers_per_cell=0, vdw_gap_angstrom=float(vacuum), inplane_lattice_angstrom=None,
                         warnings=("normal from the vacuum of the slab",))


def read_compound(campaign: str | os.PathLike, name: str, memo: dict | None = None) -> ImportResult:
    """Read and import one compound folder; raises ImportProblem."""
    from lamellume import calcio, calculations
    from lamellume.calculations import Calculation, Dielectric, ImportProblem

    memo = {} if memo is None else memo
    folder = Path(campaign) / "calculations" / name
    rel_folder = f"calculations/{name}"
    if not re.fullmatch(r"[A-Za-z0-9_-]{1,80}", name):
        raise ImportProblem(rel_folder, "(folder)", "folder name must be letters, digits, '-' and '_' (it is the id)")
    description = calcio.read_description(folder, rel_folder)
    sources = _sources(folder, rel_folder, description)
    calcs: dict[str, Calculation] = {}
    for i, spec in enumerate(description["calculations"]):
        rel = f"{rel_folder}/{spec['bands']}"
        band, embedded = calcio.read_band_structure(folder / spec["bands"], rel)
        if "structure_file" in spec:
            srel = f"{rel_folder}/{spec['structure_file']}"
            structure = calcio.read_cif_structure(folder / spec["structure_file"], srel)
            source = spec["structure_file"]
        elif embedded is not None:
            structure, srel, source = calcio.structure_from_dict(embedded, rel), rel, "embedded in " + spec["bands"]
        else:
            raise ImportProblem(rel, "structure", "no structure: the band-structure file embeds none (pymatgen embeds "
                                "it only with projections) and calculations[{}].structure_file names no CIF".format(i))
        if spec["layers"] in ("1", "bulk"):
            geometry = _geometry(structure, srel, memo)
        else:  # N-layer slabs: the normal from the vacuum (the layer analysis is the slow part)
            geometry = _slab_geometry(structure, srel)
        vacuum = None
        if "vacuum_level_ev" in spec:
            vacuum = float(spec["vacuum_level_ev"])
        elif "local_potential" in spec:
            prel = f"{rel_folder}/{spec['local_potential']}"
            if geometry.layer_normal is None:
                raise ImportProblem(prel, "(file)", "no layer normal to average along")
            profile, step = calcio.planar_average(folder / spec["local_potential"], prel, geometry.layer_normal)
            try:
                vacuum = calculations.vacuum_level_from_profile(profile, step)
            except ValueError as exc:
                raise ImportProblem(prel, "(file)", f"{exc}; layer count {spec['layers']} cannot be put on the "
                                    "vacuum level") from None
        calcs[spec["layers"]] = Calculation(spec["layers"], rel, band, structure, geometry, vacuum, source)
    eps, static, frame, drel = calcio.read_dielectric(folder, rel_folder, description["dielectric"])
    dielectric = Dielectric(eps, static, frame, description["dielectric"].get("calculation", "bulk"), drel)
    if "bulk" not in calcs:
        raise ImportProblem(f"{rel_folder}/{calcio.DESCRIPTION}", "calculations",
                            "missing layer count bulk: a compound needs a monolayer (1) and a bulk calculation")
    from lamellume.structure import compare_geometry

    spacing, lattice, _ = compare_geometry(None, None, calcs["bulk"].geometry)
    if spacing is None or lattice is None:
        raise ImportProblem(calcs["bulk"].file, "structure", "the bulk structure gives no layer spacing or lattice")
    return calculations.import_compound(name, description, f"{rel_folder}/{calcio.DESCRIPTION}", calcs, dielectric,
                                        spacing, lattice, sources)


def _reject(name: str, problem: ImportProblem, key: str) -> dict:
    return {"entry_id": name, "source_file": problem.file, "field": problem.field, "reason": problem.reason,
            "stage": STAGE, "input_hash": key}


def compound_key(campaign: str | os.PathLike, name: str, code_version: str) -> str:
    """Cache key of a compound: its folder's file hashes and the import code version."""
    from lamellume import calcio

    folder = Path(campaign) / "calculations" / name
    parts = [code_version]
    try:
        entries = sorted(e.name for e in os.scandir(folder) if e.is_file() and not e.name.startswith("."))
    except OSError:
        entries = []
    for entry in entries:
        parts.append(f"{entry}:{calcio.sha256_file(folder / entry)}")
    return io.sha256_bytes("\n".join(parts).encode())[:32]


def run_import(names: Sequence[str], campaign: str, cache_dir: str, outputs: Mapping[str, str]) -> dict[str, int]:
    """Import the compound folders ``names``; write records, rejects and the valley report.

    Parameters
    ----------
    names : compound folder names (ids) of this job.
    campaign : the campaign folder.
    cache_dir : this job's cache folder.
    outputs : 'records' (a folder: one <id>.json per imported compound),
        'rejects' (Parquet, the columns of the screen's rejects table) and
        'report' (Parquet, one row per valley: label, band, mass source,
        principal masses, fit quality, what constrains the tensor).
    """
    import pandas as pd

    from lamellume.calculations import ImportProblem

    code_version = provenance.code_version(__name__.rsplit(".", 1)[-1])  # this module's import graph
    cache = Path(cache_dir)
    records_dir = Path(outputs["records"])
    records_dir.mkdir(parents=True, exist_ok=True)
    rejects, report = [], []
    memo: dict = {}
    counts = {"imported": 0, "rejected": 0, "reused": 0}
    for name in sorted(names):
        key = compound_key(campaign, name, code_version)
        cached_path = cache / f"{name}.json"
        cached = None
        if cached_path.exists():
            try:
                cached = io.read_json(cached_path)
            except (OSError, ValueError):
                cached = None
        if cached is not None and cached.get("key") == key:
            counts["reused"] += 1
            result = cached
        else:
            try:
                out = read_compound(campaign, name, memo)
                result = {"key": key, "record": out.record, "report": out.report, "warnings": out.warnings,
                          "rejects": []}
                log.info("imported %s (%d valleys)", name, len(out.record["valleys"]))
            except ImportProblem as exc:
                result = {"key": key, "record": None, "report": [], "warnings": [], "rejects": [_reject(name, exc, key)]}
                log.info("rejected %s: %s", name, exc)
            io.write_json(result, cached_path)
            counts["imported" if result["record"] else "rejected"] += 1
        if result["record"] is not None:
            io.write_json(result["record"], records_dir / f"{name}.json")
        rejects += result["rejects"]
        for row in result["report"]:
            report.append({"entry_id": name, **{k: (", ".join(map(str, v)) if isinstance(v, list) else v)
                                                for k, v in row.items()},
                           "warnings": " | ".join(result["warnings"]), "input_hash": key})
    reject_frame = pd.DataFrame(rejects, columns=REJECT_COLUMNS)
    reject_frame["physics_hash"] = ""
    reject_frame["code_version"] = code_version
    io.write_parquet(reject_frame.astype("string"), outputs["rejects"])
    report_frame = pd.DataFrame(report)
    if len(report_frame):
        for col in ("fit_rms_ev", "angle_deg"):
            report_frame[col] = pd.to_numeric(report_frame[col]).astype(float)
    io.write_parquet(report_frame, outputs["report"],
                     units={"fit_rms_ev": "eV", "angle_deg": "degree", "masses_me": "m_e"},
                     descriptions=REPORT_DESCRIPTIONS)
    log.info("import done: %s", counts)
    return counts


#: Columns of the import report (results/imported/<shard>/report.parquet).
REPORT_DESCRIPTIONS = {
    "entry_id": "compound identifier (its folder under calculations/)",
    "label": "valley label in the generated record",
    "band": "valence or conduction",
    "extremum_in": "layer counts where the band has an extremum at this position",
    "mass_from": "layer count whose band structure gave the mass",
    "masses_me": "principal in-plane carrier masses m1, m2 (m_e), layer frame",
    "angle_deg": "angle of the m1 axis from the in-plane x axis (shortest lattice vector), degrees",
    "fit_rms_ev": "rms residual of the quadratic band fit, eV",
    "nonparabolic": "the quartic test of the fit flags the band as non-parabolic within the fit radius",
    "n_points": "k points in the fit (samples and their symmetry images)",
    "constraints": "what fixes the in-plane mass tensor: path directions, grid, little-group symmetry",
    "warnings": "import warnings of the compound",
    "input_hash": "hash of the compound's files and the import code",
}


