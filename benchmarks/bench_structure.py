"""Time lamellume.structure.analyse_cif_text per structure and bonding criterion.

Run: ``.venv/bin/python benchmarks/bench_structure.py [repeats]`` from the
repository root. Prints the mean and minimum wall time per call (CIF parsing,
bonding, Larsen components and layer metrics), for the structures used in
``tests/unit/test_structure.py`` plus a 3x3x1 MoS2 supercell (54 sites) to show
the scaling with cell size. No assertions: benchmarks never gate tests.
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "workflow"))
sys.path.insert(0, str(ROOT / "tests" / "unit"))

from pymatgen.io.cif import CifWriter  # noqa: E402

import test_structure as cases  # noqa: E402
from lamellume.structure import BONDING_CRITERIA, analyse_cif_text  # noqa: E402


def _entries():
    builders = {name: spec[0] for name, spec in sorted(cases.LAYERED.items())}
    builders.update({"NaCl": cases._nacl, "Si": cases._si, "GaAs": cases._gaas})
    out = {}
    for name, build in builders.items():
        s = build()
        out[name] = (len(s), str(CifWriter(s)))
    big = cases._mos2()
    big.make_supercell([3, 3, 1])
    out["MoS2_3x3x1"] = (len(big), str(CifWriter(big)))
    return out


def main(repeats: int = 5) -> None:
    entries = _entries()
    analyse_cif_text(entries["graphite"][1])  # warm-up: imports and caches
    print(f"analyse_cif_text wall time per call, {repeats} repeats (ms)")
    print(f"{'structure':<18}{'sites':>6}" + "".join(f"{b + ' mean':>22}{'min':>9}" for b in BONDING_CRITERIA))
    totals = {b: [] for b in BONDING_CRITERIA}
    for name, (n_sites, text) in entries.items():
        row = f"{name:<18}{n_sites:>6}"
        for bonding in BONDING_CRITERIA:
            times = []
            for _ in range(repeats):
                t0 = time.perf_counter()
                analyse_cif_text(text, bonding=bonding)
                times.append(time.perf_counter() - t0)
            totals[bonding].append(statistics.mean(times))
            row += f"{1e3 * statistics.mean(times):>22.1f}{1e3 * min(times):>9.1f}"
        print(row)
    for bonding in BONDING_CRITERIA:
        print(f"mean over entries, {bonding}: {1e3 * statistics.mean(totals[bonding]):.1f} ms")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 5)
