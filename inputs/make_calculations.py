#!/usr/bin/env python3
"""Write SYNTHETIC first-principles-like calculations for the import stage.

Every band structure here comes from an invented tight-binding-like model on a
hexagonal or rectangular lattice, not from any calculation; the files are
written through pymatgen's own serialisation (``BandStructureSymmLine`` /
``BandStructure`` ``as_dict``), so the import reads exactly what pymatgen
writes. The tests use the same models with masses derived analytically
(sympy); the demo campaign (``inputs/demo/calculations``) holds a few compounds
made this way, marked SYNTHETIC in their descriptions.

Models (f = fractional reciprocal coordinates, energies in eV)
--------------------------------------------------------------
Hexagonal (a1, a2 at 120 degrees):
    s(f) = cos 2 pi f1 + cos 2 pi f2 + cos 2 pi (f1 + f2)      (3 at Gamma, -3/2 at K)
    g(f) = cos 2 pi (2 f1 + f2) + cos 2 pi (f1 + 2 f2) + cos 2 pi (f1 - f2)
    valence    E_v = ev + av (s - sv)^2 - av (3 - sv)^2 + tz cos 2 pi f3
    conduction E_c = ec + bc s + gc g + uc cos 2 pi f3
Rectangular:
    E_v = ev + 2 tx (cos 2 pi f1 - 1) + 2 ty (cos 2 pi f2 - 1)   (maximum at Gamma, tx, ty > 0)
    E_c = ec - 2 ux (cos 2 pi f1 - 1) - 2 uy (cos 2 pi f2 - 1)

Usage: make_calculations.py OUT_CAMPAIGN  (writes OUT_CAMPAIGN/calculations/<id>/...)
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np

SYNTHETIC = "SYNTHETIC demo data: invented model band structures, not a calculation"

HEX_PATH = [("\\Gamma", (0.0, 0.0, 0.0)), ("M", (0.5, 0.0, 0.0)), ("K", (1 / 3, 1 / 3, 0.0)),
            ("\\Gamma", (0.0, 0.0, 0.0))]
RECT_PATH = [("\\Gamma", (0.0, 0.0, 0.0)), ("X", (0.5, 0.0, 0.0)), ("S", (0.5, 0.5, 0.0)),
             ("Y", (0.0, 0.5, 0.0)), ("\\Gamma", (0.0, 0.0, 0.0))]


def hex_s(f):
    f = np.asarray(f, dtype=float)
    return (np.cos(2 * np.pi * f[:, 0]) + np.cos(2 * np.pi * f[:, 1]) + np.cos(2 * np.pi * (f[:, 0] + f[:, 1])))


def hex_g(f):
    f = np.asarray(f, dtype=float)
    return (np.cos(2 * np.pi * (2 * f[:, 0] + f[:, 1])) + np.cos(2 * np.pi * (f[:, 0] + 2 * f[:, 1]))
            + np.cos(2 * np.pi * (f[:, 0] - f[:, 1])))


def hex_bands(f, p):
    """Valence and conduction band of the hexagonal model (p: dict of parameters), shape (2, nk)."""
    s, g = hex_s(f), hex_g(f)
    cz = np.cos(2 * np.pi * np.asarray(f)[:, 2])
    ev = p["ev"] + p["av"] * (s - p["sv"]) ** 2 - p["av"] * (3 - p["sv"]) ** 2 + p.get("tz", 0.0) * cz
    ec = p["ec"] + p["bc"] * s + p.get("gc", 0.0) * g + p.get("uz", 0.0) * cz
    return np.array([ev, ec])


def rect_bands(f, p):
    """Valence and conduction band of the rectangular model, shape (2, nk)."""
    f = np.asarray(f, dtype=float)
    cx, cy = np.cos(2 * np.pi * f[:, 0]) - 1, np.cos(2 * np.pi * f[:, 1]) - 1
    ev = p["ev"] + 2 * p["tx"] * cx + 2 * p["ty"] * cy
    ec = p["ec"] - 2 * p["ux"] * cx - 2 * p["uy"] * cy
    return np.array([ev, ec])


def hex_structure(layers, a=3.19, c_bulk=6.2, vacuum=18.0, tilt=(0.0, 0.0), rotation=None):
    """A MoS2-like stack of `layers` layers ("bulk": one layer per cell, period c_bulk), Angstrom.

    ``tilt`` shifts the third cell vector in-plane (layers then not normal to c);
    ``rotation`` (3x3) turns the whole crystal in the Cartesian frame.
    """
    from pymatgen.core import Lattice, Structure

    n = 1 if layers == "bulk" else int(layers)
    c = c_bulk if layers == "bulk" else vacuum + n * c_bulk
    a1 = np.array([a, 0.0, 0.0])
    a2 = np.array([-a / 2, a * np.sqrt(3) / 2, 0.0])
    a3 = np.array([tilt[0], tilt[1], c])
    m = np.array([a1, a2, a3])
    if rotation is not None:
        m = m @ np.asarray(rotation).T
    species, coords = [], []
    for i in range(n):
        z0 = 0.5 + (i - (n - 1) / 2) * c_bulk / c
        dz = 1.56 / c
        species += ["Mo", "S", "S"]
        coords += [[1 / 3, 2 / 3, z0], [2 / 3, 1 / 3, z0 + dz], [2 / 3, 1 / 3, z0 - dz]]
    # Fractional x, y are those of an untilted cell: shift them against the tilt.
    coords = np.array(coords)
    lat = Lattice(m)
    cart = coords @ np.array([a1, a2, np.array([0.0, 0.0, c])])
    if rotation is not None:
        cart = cart @ np.asarray(rotation).T
    return Structure(lat, species, cart, coords_are_cartesian=True)


def rect_structure(layers, a=3.0, b=4.0, c_bulk=5.5, vacuum=15.0, tilt=(0.0, 0.0), rotation=None):
    """A rectangular SnS-like layer stack (two atoms per layer), Angstrom."""
    from pymatgen.core import Lattice, Structure

    n = 1 if layers == "bulk" else int(layers)
    c = c_bulk if layers == "bulk" else vacuum + n * c_bulk
    m = np.array([[a, 0.0, 0.0], [0.0, b, 0.0], [tilt[0], tilt[1], c]])
    species, cart = [], []
    for i in range(n):
        z = c / 2 + (i - (n - 1) / 2) * c_bulk
        species += ["Sn", "S"]
        cart += [[0.0, 0.0, z], [a / 2, b / 2, z + 1.0]]
    cart = np.array(cart)
    if rotation is not None:
        m = m @ np.asarray(rotation).T
        cart = cart @ np.asarray(rotation).T
    return Structure(Lattice(m), species, cart, coords_are_cartesian=True)


def path_kpoints(path, per_segment):
    """Fractional k points of a labelled path, end points repeated at each segment joint (pymatgen layout)."""
    ks = []
    for (_, a), (_, b) in zip(path[:-1], path[1:]):
        a, b = np.array(a), np.array(b)
        for t in np.linspace(0.0, 1.0, per_segment):
            ks.append(a + t * (b - a))
    return np.array(ks), {lab: list(coords) for lab, coords in path}


def grid_kpoints(mesh):
    """Fractional k points of a full Gamma-centred grid."""
    axes = [np.arange(n) / n for n in mesh]
    g = np.array(np.meshgrid(*axes, indexing="ij")).reshape(3, -1).T
    return g


def band_structure_dict(structure, kpoints, labels, bands_fn, params, *, line=True, efermi=None,
                        spin_split=None, shift_ev=0.0, embed_structure=True):
    """pymatgen's own dictionary of a band structure built from a model.

    ``bands_fn(kpoints, params)`` gives (valence, conduction) energies; a deep
    band 2 eV below and a high band 2 eV above are added so the edge bands are
    not the outermost. ``spin_split`` (eV) makes a spin-polarised structure with
    spin down shifted up by that much. ``shift_ev`` is added to every energy
    (the code's own energy zero, removed again by the vacuum level).
    """
    from pymatgen.electronic_structure.bandstructure import BandStructure, BandStructureSymmLine
    from pymatgen.electronic_structure.core import Spin

    vb, cb = bands_fn(kpoints, params)
    base = np.array([vb - 2.0 - 0.1 * np.cos(2 * np.pi * kpoints[:, 0]), vb, cb,
                     cb + 2.0 + 0.1 * np.cos(2 * np.pi * kpoints[:, 1])]) + shift_ev
    eig = {Spin.up: base}
    if spin_split is not None:
        eig[Spin.down] = base + spin_split
    if efermi is None:
        efermi = 0.5 * (max(e[1].max() for e in eig.values()) + min(e[2].min() for e in eig.values()))
    proj = None
    if embed_structure:
        proj = {s: np.zeros((4, len(kpoints), 1, len(structure))) for s in eig}
    rec = structure.lattice.reciprocal_lattice
    cls = BandStructureSymmLine if line else BandStructure
    bs = cls(kpoints, eig, rec, efermi, labels, structure=structure if embed_structure else None,
             projections=proj)
    return bs.as_dict()


def write_json(obj, path: Path) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    from monty.json import MontyEncoder

    path.write_text(json.dumps(obj, cls=MontyEncoder))


# Invented demo compounds: hexagonal, direct at K in the monolayer, indirect (Gamma -> K) in bulk.
DEMO = {
    "calc-hexa-1": {"a": 3.19, "c": 6.2, "shift": -1.8,
                    "layers": {"1": {"ev": -5.90, "av": 0.10, "sv": 1.2, "ec": -3.20, "bc": 0.28},
                               "2": {"ev": -5.60, "av": 0.10, "sv": 0.9, "ec": -3.35, "bc": 0.27},
                               "bulk": {"ev": -5.35, "av": 0.10, "sv": 0.4, "ec": -3.55, "bc": 0.26, "tz": 0.04}},
                    "eps": [[15.2, 0, 0], [0, 15.2, 0], [0, 0, 6.6]]},
    "calc-hexa-2": {"a": 3.32, "c": 6.5, "shift": 2.4,
                    "layers": {"1": {"ev": -5.50, "av": 0.09, "sv": 1.3, "ec": -3.55, "bc": 0.24},
                               "bulk": {"ev": -5.05, "av": 0.09, "sv": 0.5, "ec": -3.85, "bc": 0.23, "tz": 0.05}},
                    "eps": [[17.0, 0, 0], [0, 17.0, 0], [0, 0, 7.4]]},
}
DEMO_RECT = {
    "calc-rect-1": {"layers": {"1": {"ev": -4.9, "tx": 0.55, "ty": 0.22, "ec": -3.3, "ux": 0.60, "uy": 0.25},
                               "2": {"ev": -4.8, "tx": 0.55, "ty": 0.22, "ec": -3.45, "ux": 0.60, "uy": 0.25},
                               "bulk": {"ev": -4.6, "tx": 0.55, "ty": 0.22, "ec": -3.7, "ux": 0.60, "uy": 0.25}},
                    "eps": [[13.0, 0, 0], [0, 11.0, 0], [0, 0, 8.0]]},
}


def write_demo(campaign: Path) -> list[str]:
    """Write the demo compounds given as calculations; return their ids."""
    root = campaign / "calculations"
    if root.exists():
        import shutil

        shutil.rmtree(root)
    ids = []
    for ident, spec in DEMO.items():
        folder = root / ident
        calcs = []
        for key, p in spec["layers"].items():
            s = hex_structure(key, a=spec["a"], c_bulk=spec["c"])
            k, labels = path_kpoints(HEX_PATH, 61)
            d = band_structure_dict(s, k, labels, hex_bands, p, shift_ev=spec["shift"])
            write_json(d, folder / f"bands_{key}.json")
            calcs.append({"layers": key, "bands": f"bands_{key}.json", "vacuum_level_ev": spec["shift"]})
        write_json({"dielectric_format": "lamellume-dielectric/1", "frame": "crystal", "electronic": spec["eps"]},
                   folder / "dielectric.json")
        write_json({"calcset_format": "lamellume-calcset/1", "formula": f"Hx{ident[-1]}Yq2 (invented)",
                    "provenance": SYNTHETIC, "calculations": calcs, "dielectric": {"file": "dielectric.json"},
                    "fit_radius_per_angstrom": 0.04}, folder / "calcset.json")
        ids.append(ident)
    for ident, spec in DEMO_RECT.items():
        folder = root / ident
        calcs = []
        for key, p in spec["layers"].items():
            s = rect_structure(key, tilt=(0.8, 0.5))
            k = grid_kpoints((20, 20, 1) if key != "bulk" else (20, 20, 2))
            d = band_structure_dict(s, k, {"\\Gamma": [0, 0, 0]}, rect_bands, p, line=False)
            write_json(d, folder / f"bands_{key}.json")
            calcs.append({"layers": key, "bands": f"bands_{key}.json", "vacuum_level_ev": 0.0})
        write_json({"dielectric_format": "lamellume-dielectric/1", "frame": "layer", "electronic": spec["eps"]},
                   folder / "dielectric.json")
        write_json({"calcset_format": "lamellume-calcset/1", "formula": "RcZt (invented)", "provenance": SYNTHETIC,
                    "calculations": calcs, "dielectric": {"file": "dielectric.json"}, "fit_radius_per_angstrom": 0.15},
                   folder / "calcset.json")
        ids.append(ident)
    return ids


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("campaign", type=Path, help="campaign folder (calculations/ is written inside)")
    args = parser.parse_args(argv)
    ids = write_demo(args.campaign)
    print(f"wrote {len(ids)} SYNTHETIC compounds as calculations: {', '.join(ids)}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
