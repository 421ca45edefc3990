#!/usr/bin/env python3
"""Time the import of first-principles calculations against pymatgen's own loading.

Generates N SYNTHETIC compounds (inputs/make_calculations.py models, every
compound with its own lattice constant and band parameters) with four
calculations each (1, 2 and 3 layers and bulk; labelled paths of 3 x 61 k
points, 8 bands, structure embedded through a one-orbital projection, as
pymatgen writes it), then measures in this process:

* **pymatgen load**: ``monty.serialization.loadfn`` of every band-structure file
  (pymatgen rebuilds its ``BandStructureSymmLine`` objects), nothing else;
* **import**: ``lamellume.importer.run_import`` of every compound from an empty
  cache: descriptions, band structures, structures, layer analysis, symmetry,
  valleys, mass fits, records and tables written;
* **re-import, one revised**: the same with the cache filled and one
  calculation file rewritten.

and prints where the import spends its time (cProfile, cumulative, top entries).
It never asserts; the target (import <= 2x the pymatgen load) is read off.

Usage: .venv/bin/python benchmarks/bench_import.py [--count 1000] [--keep DIR]
"""

from __future__ import annotations

import argparse
import cProfile
import importlib.util
import io as _io
import json
import pstats
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO / "workflow"))
_spec = importlib.util.spec_from_file_location("make_calculations", REPO / "inputs" / "make_calculations.py")
mc = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(mc)

LAYERS = ("1", "2", "3", "bulk")


def write_campaign(root: Path, count: int, seed: int = 11) -> list[str]:
    """N compounds x 4 calculations; returns the band-structure file paths."""
    from pymatgen.electronic_structure.bandstructure import BandStructureSymmLine
    from pymatgen.electronic_structure.core import Spin

    rng = np.random.default_rng(seed)
    files = []
    k, labels = mc.path_kpoints(mc.HEX_PATH, 61)
    for i in range(count):
        ident = f"bench-{i:05d}"
        folder = root / "calculations" / ident
        folder.mkdir(parents=True)
        a = 3.0 + 0.5 * rng.random()
        c = 6.0 + 1.0 * rng.random()
        calcs = []
        for j, key in enumerate(LAYERS):
            p = {"ev": -5.9 + 0.15 * j, "av": 0.08 + 0.04 * rng.random(), "sv": 1.2 - 0.25 * j,
                 "ec": -3.2 - 0.1 * j, "bc": 0.25 + 0.05 * rng.random(), "tz": 0.04 if key == "bulk" else 0.0}
            s = mc.hex_structure(key, a=a, c_bulk=c)
            vb, cb = mc.hex_bands(k, p)
            bands = np.array([vb - 2.0, vb - 1.0, vb, cb, cb + 1.0, cb + 1.5, cb + 2.0, cb + 3.0])
            proj = {Spin.up: np.zeros((len(bands), len(k), 1, len(s)))}
            bs = BandStructureSymmLine(k, {Spin.up: bands}, s.lattice.reciprocal_lattice,
                                       0.5 * (vb.max() + cb.min()), labels, structure=s, projections=proj)
            path = folder / f"bands_{key}.json"
            path.write_text(json.dumps(bs.as_dict()))
            files.append(path)
            calcs.append({"layers": key, "bands": path.name, "vacuum_level_ev": 0.0})
        (folder / "eps.json").write_text(json.dumps({"dielectric_format": "lamellume-dielectric/1", "frame": "layer",
                                                     "electronic": [[14.0, 0, 0], [0, 14.0, 0], [0, 0, 6.0]]}))
        (folder / "calcset.json").write_text(json.dumps({
            "calcset_format": "lamellume-calcset/1", "provenance": mc.SYNTHETIC, "calculations": calcs,
            "dielectric": {"file": "eps.json"}, "fit_radius_per_angstrom": 0.05}))
    return files


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--count", type=int, default=1000)
    parser.add_argument("--keep", type=Path, default=None, help="keep the campaign in this folder")
    args = parser.parse_args(argv)

    from monty.serialization import loadfn

    from lamellume import importer

    tmp = Path(tempfile.mkdtemp(prefix="bench-import-"))
    root = args.keep or tmp / "campaign"
    t0 = time.perf_counter()
    files = write_campaign(root, args.count)
    size = sum(p.stat().st_size for p in files)
    print(f"campaign: {args.count} compounds x {len(LAYERS)} calculations, {size / 1e6:.1f} MB of band structures "
          f"(written in {time.perf_counter() - t0:.1f} s)")

    # Warm-up outside the timings: module imports and pymatgen's first-call caches.
    importer.read_compound(root, "bench-00000")
    loadfn(files[0])

    t0 = time.perf_counter()
    for path in files:
        loadfn(path)
    t_load = time.perf_counter() - t0
    print(f"pymatgen load (loadfn, {len(files)} files): {t_load:.1f} s ({1000 * t_load / len(files):.1f} ms per file)")

    out = {"records": str(tmp / "out" / "records"), "rejects": str(tmp / "out" / "rejects.parquet"),
           "report": str(tmp / "out" / "report.parquet")}
    names = sorted(p.name for p in (root / "calculations").iterdir())
    t0 = time.perf_counter()
    counts = importer.run_import(names, str(root), str(tmp / "cache"), out)
    t_import = time.perf_counter() - t0
    print(f"import ({counts}): {t_import:.1f} s ({1000 * t_import / len(files):.1f} ms per calculation); "
          f"ratio import / pymatgen load = {t_import / t_load:.2f} (target <= 2)")

    path = files[len(files) // 2]
    d = json.loads(path.read_text())
    d["efermi"] += 1e-3
    path.write_text(json.dumps(d))
    t0 = time.perf_counter()
    counts = importer.run_import(names, str(root), str(tmp / "cache"), out)
    print(f"re-import with one revised file ({counts}): {time.perf_counter() - t0:.1f} s")

    # Where the time goes: a profiled import of the first 100 compounds (profiling slows it down,
    # so it is kept apart from the timing above).
    profile = cProfile.Profile()
    profile.enable()
    importer.run_import(names[:100], str(root), str(tmp / "cache-profile"), {
        "records": str(tmp / "profile" / "records"), "rejects": str(tmp / "profile" / "rejects.parquet"),
        "report": str(tmp / "profile" / "report.parquet")})
    profile.disable()
    stream = _io.StringIO()
    pstats.Stats(profile, stream=stream).sort_stats("cumulative").print_stats(30)
    print("where the import spends its time (100 compounds, profiled, cumulative):")
    print("\n".join(stream.getvalue().splitlines()[:60]))
    if args.keep is None:
        shutil.rmtree(tmp, ignore_errors=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
