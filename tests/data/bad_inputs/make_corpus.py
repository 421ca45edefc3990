#!/usr/bin/env python3
"""Generate the bad-input corpus: malformed campaign records and structures.

Nothing is committed but this script; the corpus is written at test time into
a temporary campaign folder (the > 2 MB record included), so the repository
stays small. Every record is SYNTHETIC: the numbers of the valid template are
invented and each case breaks it in one way.

Each :class:`Case` names the files it writes (relative to the campaign folder;
a value is the file's bytes or a :class:`Special` file-system object such as a
named pipe or a dangling link), the stem of the record that must be rejected,
the ``field`` that at least one reject row of that record must carry (exactly)
and a regular expression its ``reason`` must match, and the ``stage`` at which
the record is rejected: ``skipped`` (a near-miss file name, never opened),
``read`` (io.read_record), ``contract`` (RecordChecker), ``structure`` (the CIF
analysis), ``normalise`` (ingest) or ``duplicate`` (identifiers equal apart from
letter case). File-level problems carry the field ``(file)``, file-name ones
``(file name)``. ``source`` is the record's file name when it is not
``<stem>.json``.

Some cases also write valid records that must be screened (``valid_stems``).

Usage:
    python tests/data/bad_inputs/make_corpus.py --out /tmp/corpus        # writes entries/, structures/
    python tests/data/bad_inputs/make_corpus.py --out /tmp/corpus --list # also prints the cases
"""

from __future__ import annotations

import argparse
import copy
import json
import os
import random
import socket
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

#: Size of the oversized record; the reader's limit is 2,000,000 bytes.
HUGE_RECORD_BYTES = 2_200_000
#: Size of the oversized CIF; the reader's limit is 5,000,000 bytes.
HUGE_CIF_BYTES = 5_100_000
NOTE = "SYNTHETIC test record from tests/data/bad_inputs/make_corpus.py; invented numbers"


def valid_record(ident: str) -> dict:
    """A small valid record with invented numbers (direct gap at K as a monolayer)."""
    return {
        "record_format": "lamellume-record/1",
        "id": ident,
        "formula": "Qz2Lm (invented)",
        "provenance": NOTE,
        "energy_reference": "vacuum level",
        "layer_spacing_angstrom": 6.4,
        "inplane_lattice_angstrom": 3.3,
        "dielectric": {"frame": "layer",
                       "electronic": [[14.0, 0.0, 0.0], [0.0, 14.0, 0.0], [0.0, 0.0, 6.5]]},
        "valleys": [
            {"label": "K", "band": "valence", "edge_ev": {"1": -5.9, "bulk": -5.8},
             "mass": {"isotropic_me": 0.55}},
            {"label": "G", "band": "valence", "edge_ev": {"1": -6.4, "bulk": -5.6},
             "mass": {"isotropic_me": 1.2}},
            {"label": "K", "band": "conduction", "edge_ev": {"1": -4.1, "bulk": -4.2},
             "mass": {"isotropic_me": 0.45}},
            {"label": "Q", "band": "conduction", "edge_ev": {"1": -3.8, "bulk": -4.3},
             "mass": {"isotropic_me": 0.6}},
        ],
    }


@dataclass(frozen=True)
class Special:
    """A file-system object that is not a regular file with content.

    ``kind``: ``directory``, ``fifo``, ``socket`` or ``symlink`` (to ``target``,
    relative to the link's folder or absolute).
    """

    kind: str
    target: str = ""

    def create(self, path: Path) -> None:
        if self.kind == "directory":
            path.mkdir()
        elif self.kind == "fifo":
            os.mkfifo(path)
        elif self.kind == "socket":
            sock = socket.socket(socket.AF_UNIX)
            try:
                sock.bind(str(path))
            finally:
                sock.close()
        elif self.kind == "symlink":
            path.symlink_to(self.target)
        else:
            raise ValueError(self.kind)


@dataclass(frozen=True)
class Case:
    """One malformed input and what its reject row must say."""

    stem: str
    field: str
    reason: str
    stage: str
    files: dict[str, bytes | Special]
    valid_stems: tuple[str, ...] = ()
    note: str = ""
    source: str = ""

    @property
    def entry_path(self) -> str:
        return f"entries/{self.stem}.json"

    @property
    def source_file(self) -> str:
        """The record's file name as the rejects table shows it (non-UTF-8 bytes as \\xNN)."""
        name = self.source or f"{self.stem}.json"
        return name.encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")


def _dump(obj: Any) -> bytes:
    return (json.dumps(obj, indent=1) + "\n").encode("utf-8")


def _mutated(stem: str, fn: Callable[[dict], Any]) -> dict:
    rec = copy.deepcopy(valid_record(stem))
    fn(rec)
    return rec


def _set(path: str, value: Any) -> Callable[[dict], None]:
    """Setter for a dotted path with [i] indices, e.g. 'valleys[0].mass.isotropic_me'."""
    parts = path.replace("]", "").replace("[", ".").split(".")

    def fn(rec: dict) -> None:
        node = rec
        for p in parts[:-1]:
            node = node[int(p) if isinstance(node, list) else p]
        node[int(parts[-1]) if isinstance(node, list) else parts[-1]] = value

    return fn


def _delete(path: str) -> Callable[[dict], None]:
    head, _, last = path.rpartition(".")

    def fn(rec: dict) -> None:
        node = rec
        if head:
            for p in head.replace("]", "").replace("[", ".").split("."):
                node = node[int(p) if isinstance(node, list) else p]
        del node[last]

    return fn


def _replace_text(stem: str, old: str, new: str) -> bytes:
    """The valid record's JSON text with one literal replaced (for non-JSON tokens)."""
    text = json.dumps(valid_record(stem)) + "\n"
    assert old in text, old
    return text.replace(old, new, 1).encode("utf-8")


def _json_case(stem: str, fn: Callable[[dict], Any], field: str, reason: str, stage: str = "contract",
               note: str = "") -> Case:
    return Case(stem, field, reason, stage, {f"entries/{stem}.json": _dump(_mutated(stem, fn))}, note=note)


def _raw_case(stem: str, content: bytes, field: str, reason: str, stage: str = "read", note: str = "") -> Case:
    return Case(stem, field, reason, stage, {f"entries/{stem}.json": content}, note=note)


def _special_case(stem: str, special: Special, reason: str, note: str = "") -> Case:
    """A record path that is not a regular file: rejected at the read, never opened."""
    return Case(stem, "(file)", reason, "read", {f"entries/{stem}.json": special}, note=note)


def _name_case(stem: str, name: str, reason: str, note: str = "") -> Case:
    """A valid record under a near-miss file name: listed, skipped with a reason, never read."""
    return Case(stem, "(file name)", reason, "skipped", {f"entries/{name}": _dump(valid_record(stem))},
                note=note, source=name)


def _text_case(stem: str, old: str, new: str, field: str, reason: str, note: str = "") -> Case:
    """The valid record's JSON text with one literal replaced; rejected at the read."""
    return _raw_case(stem, _replace_text(stem, old, new), field, reason, note=note)


def _edge_keys(keys: dict) -> Callable[[dict], None]:
    return _set("valleys[0].edge_ev", keys)


def _only(band: str) -> Callable[[dict], None]:
    def fn(rec: dict) -> None:
        rec["valleys"] = [v for v in rec["valleys"] if v["band"] == band]
    return fn


def _nested(depth: int) -> Any:
    node: Any = 1.0
    for _ in range(depth):
        node = {"x": node}
    return node


def _samples(n: int) -> Callable[[dict], None]:
    def fn(rec: dict) -> None:
        v = rec["valleys"][2]
        v.pop("mass")
        ks = [[0.02 * i, 0.0] for i in range(n)]
        energies = [-4.1 + 0.08 * (0.02 * i) ** 2 / 0.45 for i in range(n)]
        v["band_samples"] = {"k_per_angstrom": ks, "energy_ev": energies, "extremum_at_origin": True}
    return fn


def _cif_case(stem: str, cif: bytes | Special | None, field: str, reason: str, stage: str, note: str) -> Case:
    rec = _mutated(stem, lambda r: (r.update(structure_file=f"{stem}.cif"),
                                    r.pop("layer_spacing_angstrom"), r.pop("inplane_lattice_angstrom")))
    files: dict[str, bytes | Special] = {f"entries/{stem}.json": _dump(rec)}
    if cif is not None:
        files[f"structures/{stem}.cif"] = cif
    return Case(stem, field, reason, stage, files, note=note)


#: Rock salt (NaCl), conventional cell a = 5.64 Angstrom (from memory): a 3D-bonded crystal
#: written in P1 with its eight atoms, SYNTHETIC test input.
ROCK_SALT_CIF = b"""data_rock_salt_synthetic
_symmetry_space_group_name_H-M 'P 1'
_cell_length_a 5.64
_cell_length_b 5.64
_cell_length_c 5.64
_cell_angle_alpha 90
_cell_angle_beta 90
_cell_angle_gamma 90
loop_
_symmetry_equiv_pos_as_xyz
'x, y, z'
loop_
_atom_site_label
_atom_site_type_symbol
_atom_site_fract_x
_atom_site_fract_y
_atom_site_fract_z
Na1 Na 0.0 0.0 0.0
Na2 Na 0.5 0.5 0.0
Na3 Na 0.5 0.0 0.5
Na4 Na 0.0 0.5 0.5
Cl1 Cl 0.5 0.0 0.0
Cl2 Cl 0.0 0.5 0.0
Cl3 Cl 0.0 0.0 0.5
Cl4 Cl 0.5 0.5 0.5
"""


def _huge_record(stem: str) -> bytes:
    """A syntactically valid record padded past the size limit with whitespace."""
    body = _dump(valid_record(stem))
    return body[:-2] + b" " * (HUGE_RECORD_BYTES - len(body)) + body[-2:]


def cases(include_huge: bool = True) -> list[Case]:
    """All corpus cases (the > 2 MB one only with ``include_huge``)."""
    rnd = random.Random(20261202)
    out: list[Case] = [
        # --- file-level problems: field '(file)' -------------------------------------------
        _raw_case("bad-json-truncated", _dump(valid_record("bad-json-truncated"))[:-30], "(file)", r"invalid JSON"),
        _raw_case("bad-json-trailing-comma",
                  _replace_text("bad-json-trailing-comma", '"bulk": -5.8}', '"bulk": -5.8,}'),
                  "(file)", r"invalid JSON"),
        _raw_case("bad-json-single-quotes", b"{'id': 'bad-json-single-quotes'}", "(file)", r"invalid JSON"),
        _raw_case("bad-json-nan-token", _replace_text("bad-json-nan-token", "0.55", "NaN"), "(file)", r"NaN"),
        _raw_case("bad-json-infinity-token", _replace_text("bad-json-infinity-token", "6.4", "Infinity"), "(file)",
                  r"Infinity"),
        _raw_case("bad-json-minus-infinity", _replace_text("bad-json-minus-infinity", "-5.9", "-Infinity"), "(file)",
                  r"Infinity"),
        _raw_case("bad-empty-file", b"", "(file)", r"empty"),
        _raw_case("bad-whitespace-only", b" \n\t \n", "(file)", r"empty"),
        _raw_case("bad-utf16", json.dumps(valid_record("bad-utf16")).encode("utf-16"), "(file)",
                  r"UTF-16 text \(it starts with a UTF-16 byte-order mark\); save it as UTF-8"),
        _raw_case("bad-utf16-be-no-bom", json.dumps(valid_record("bad-utf16-be-no-bom")).encode("utf-16-be"),
                  "(file)", r"contains a NUL byte \(at byte 0\).*UTF-16", note="ASCII in UTF-16-BE is valid UTF-8 with NUL bytes"),
        _raw_case("bad-latin1", json.dumps(_mutated("bad-latin1", _set("formula", "Qz2Lm\u00e9 (invented)")),
                                           ensure_ascii=False).encode("latin-1"), "(file)", r"UTF-8"),
        _raw_case("bad-binary-junk", bytes(rnd.getrandbits(8) for _ in range(4096)), "(file)", r"UTF-8|invalid JSON"),
        _raw_case("bad-nul-bytes", _dump(valid_record("bad-nul-bytes")).replace(b'"formula"', b'"form\x00ula"'),
                  "(file)", r"contains a NUL byte"),
        _raw_case("bad-deeply-nested", b"[" * 200_000 + b"]" * 200_000, "(file)", r"nested too deeply"),
        _raw_case("bad-huge-int-digits", _replace_text("bad-huge-int-digits", "0.55", "1" + "0" * 5000),
                  "(file)", r"an integer with more than \d+ digits"),
        # --- structure and types (JSON Schema) ------------------------------------------------
        _json_case("bad-array-not-object", lambda r: None, "(record)", r"not of type 'object'"),
        _json_case("bad-missing-id", _delete("id"), "(record)", r"'id' is a required property"),
        _json_case("bad-missing-valleys", _delete("valleys"), "(record)", r"'valleys' is a required property"),
        _json_case("bad-missing-dielectric", _delete("dielectric"), "(record)", r"'dielectric' is a required"),
        _json_case("bad-missing-electronic", _delete("dielectric.electronic"), "dielectric",
                   r"'electronic' is a required"),
        _json_case("bad-wrong-format-tag", _set("record_format", "lamellume-record/0"), "record_format",
                   r"lamellume-record/1"),
        _json_case("bad-id-number", _set("id", 42), "id", r"not of type 'string'"),
        _json_case("bad-mass-string", _set("valleys[0].mass.isotropic_me", "0.55"), "valleys[0].mass.isotropic_me",
                   r"not of type 'number'"),
        _json_case("bad-mass-boolean", _set("valleys[0].mass.isotropic_me", True), "valleys[0].mass.isotropic_me",
                   r"not of type 'number'"),
        _json_case("bad-valleys-object", _set("valleys", {"K": 1}), "valleys", r"not of type 'array'"),
        _json_case("bad-edge-string", _set("valleys[1].edge_ev.1", "-6.4"), "valleys[1].edge_ev.1",
                   r"not of type 'number'"),
        _json_case("bad-layer-key-zero", _edge_keys({"0": -5.9, "1": -5.9, "bulk": -5.8}), "valleys[0].edge_ev",
                   r"layer-count key '0'"),
        _json_case("bad-layer-key-negative", _edge_keys({"-1": -5.9, "1": -5.9, "bulk": -5.8}), "valleys[0].edge_ev",
                   r"layer-count key '-1'"),
        _json_case("bad-layer-key-word", _edge_keys({"two": -5.9, "1": -5.9, "bulk": -5.8}), "valleys[0].edge_ev",
                   r"layer-count key 'two'"),
        _json_case("bad-layer-key-hundred", _edge_keys({"100": -5.9, "1": -5.9, "bulk": -5.8}), "valleys[0].edge_ev",
                   r"layer-count key '100'"),
        _json_case("bad-edge-missing-monolayer", _edge_keys({"bulk": -5.8}), "valleys[0].edge_ev",
                   r"'1' is a required"),
        _json_case("bad-extra-top-field", _set("colour", "blue"), "(record)", r"'colour' was unexpected"),
        _json_case("bad-extra-valley-field", _set("valleys[2].spin", "up"), "valleys[2]", r"'spin' was unexpected"),
        _json_case("bad-id-dotdot", _set("id", "../x"), "id", r"does not match"),
        _json_case("bad-id-slash", _set("id", "a/b"), "id", r"does not match"),
        _json_case("bad-id-markup", _set("id", "<b>x</b>"), "id", r"does not match"),
        _json_case("bad-id-empty", _set("id", ""), "id", r"does not match"),
        _json_case("bad-id-mismatch", _set("id", "another-name"), "id", r"differs from the file name"),
        _json_case("bad-structure-path", _set("structure_file", "../../etc/x.cif"), "structure_file",
                   r"does not match"),
        _json_case("bad-two-mass-forms", _set("valleys[0].mass.principal_me", [0.5, 0.6]), "valleys[0].mass",
                   r"exactly one in-plane mass form"),
        _json_case("bad-no-mass", _delete("valleys[3].mass"), "valleys[3]", r"exactly one of 'mass' or 'band_samples'"),
        _json_case("bad-one-valley", lambda r: r.update(valleys=r["valleys"][:1]), "valleys", r"too short|fewer"),
        _json_case("bad-nested-formula", _set("formula", _nested(300)), "formula", r"not of type 'string'"),
        # --- physics ----------------------------------------------------------------------------
        _json_case("bad-mass-negative", _set("valleys[0].mass.isotropic_me", -0.4), "valleys[0].mass.isotropic_me",
                   r"<= 0"),
        _json_case("bad-mass-zero", _set("valleys[2].mass.isotropic_me", 0.0), "valleys[2].mass.isotropic_me", r"<= 0"),
        _json_case("bad-mass-absurd", _set("valleys[2].mass.isotropic_me", 3.0e6), "valleys[2].mass.isotropic_me",
                   r"absurd|outside the plausible range"),
        _json_case("bad-mass-tiny", _set("valleys[2].mass.isotropic_me", 1e-9), "valleys[2].mass.isotropic_me",
                   r"absurd|outside the plausible range"),
        _json_case("bad-mass-exponent-overflow", lambda r: None, "valleys[0].mass.isotropic_me", r"not finite"),
        _json_case("bad-mass-huge-integer", lambda r: None, "valleys[0].mass.isotropic_me", r"not finite|absurd"),
        _json_case("bad-spacing-exponent-overflow", lambda r: None, "layer_spacing_angstrom", r"not finite"),
        _json_case("bad-eps-exponent-overflow", lambda r: None, "dielectric.electronic", r"finite"),
        _json_case("bad-edge-exponent-overflow", lambda r: None, "valleys[0].edge_ev.1", r"not finite"),
        _json_case("bad-spacing-zero", _set("layer_spacing_angstrom", 0), "layer_spacing_angstrom", r"outside"),
        _json_case("bad-lattice-negative", _set("inplane_lattice_angstrom", -3.3), "inplane_lattice_angstrom",
                   r"outside"),
        _json_case("bad-spacing-absurd", _set("layer_spacing_angstrom", 6.4e8), "layer_spacing_angstrom", r"outside"),
        _json_case("bad-edge-absurd", _set("valleys[0].edge_ev.bulk", -5.8e5), "valleys[0].edge_ev.bulk",
                   r"beyond"),
        _json_case("bad-eps-asymmetric",
                   _set("dielectric.electronic", [[9.0, 2.0, 0.0], [0.0, 9.0, 0.0], [0.0, 0.0, 4.0]]),
                   "dielectric.electronic", r"symmetric"),
        _json_case("bad-eps-indefinite",
                   _set("dielectric.electronic", [[9.0, 0.0, 0.0], [0.0, -2.0, 0.0], [0.0, 0.0, 4.0]]),
                   "dielectric.electronic", r"positive definite|definite"),
        _json_case("bad-eps-below-one",
                   _set("dielectric.electronic", [[0.5, 0.0, 0.0], [0.0, 6.0, 0.0], [0.0, 0.0, 3.0]]),
                   "dielectric.electronic", r"below 1|< 1|>= 1"),
        _json_case("bad-eps-absurd",
                   _set("dielectric.electronic", [[4.0e4, 0.0, 0.0], [0.0, 4.0e4, 0.0], [0.0, 0.0, 3.0]]),
                   "dielectric.electronic", r"plausible"),
        _json_case("bad-normal-zero", lambda r: r["dielectric"].update(frame="crystal", normal=[0, 0, 0]),
                   "dielectric.normal", r"non-zero"),
        _json_case("bad-no-valence", _only("conduction"), "valleys", r"no valence valley"),
        _json_case("bad-no-conduction", _only("valence"), "valleys", r"no conduction valley"),
        _json_case("bad-no-gap", _set("valleys[2].edge_ev", {"1": -6.5, "bulk": -6.5}), "valleys[*].edge_ev.1",
                   r"no gap"),
        _json_case("bad-duplicate-valley", _set("valleys[3].label", "K"), "valleys[3].label", r"already given"),
        _json_case("bad-samples-too-few", _samples(3), "valleys[2].band_samples.k_per_angstrom", r"too few"),
        _json_case("bad-mass-tensor-asymmetric", _set("valleys[1].mass", {"tensor_me": [[0.5, 0.1], [0.0, 0.5]]}),
                   "valleys[1].mass.tensor_me", r"not symmetric"),
        _json_case("bad-uncertainty-above-one", _set("dielectric.relative_uncertainty", 3.0),
                   "dielectric.relative_uncertainty", r"outside"),
        # --- structures -------------------------------------------------------------------------
        _cif_case("bad-cif-absent", None, "structure_file", r"not found", "contract",
                  "referenced but not present in structures/"),
        _cif_case("bad-cif-garbage", b"this is not a crystallographic information file\n" * 20, "structure_file",
                  r"bad-cif-garbage\.cif: .+", "structure", "present but not a CIF"),
        _cif_case("bad-cif-binary", bytes(rnd.getrandbits(8) for _ in range(2048)), "structure_file",
                  r"bad-cif-binary\.cif: .+", "structure", "present but binary"),
        _cif_case("bad-cif-empty", b"", "structure_file", r"bad-cif-empty\.cif: .+", "structure", "present but empty"),
        # --- not regular files: never opened --------------------------------------------------
        _special_case("bad-fs-directory", Special("directory"), r"^is a directory, not a file$"),
        _special_case("bad-fs-fifo", Special("fifo"), r"named pipe \(FIFO\)", "would block a plain open()"),
        _special_case("bad-fs-socket", Special("socket"), r"is a socket"),
        _special_case("bad-fs-dangling-link", Special("symlink", "missing-target.json"),
                      r"dangling symbolic link \(its target 'missing-target\.json' does not exist\)"),
        _special_case("bad-fs-link-dev-zero", Special("symlink", "/dev/zero"), r"is a device",
                      "endless: a size check by reported size would read it without bound"),
        _special_case("bad-fs-link-dev-null", Special("symlink", "/dev/null"), r"is a device"),
        _special_case("bad-fs-link-loop", Special("symlink", "bad-fs-link-loop.json"),
                      r"cannot read file: Too many levels of symbolic links"),
        _special_case("bad-fs-link-to-directory", Special("symlink", "."), r"is a directory, not a file"),
        # --- near-miss file names: listed, skipped with the reason, never read ----------------
        _name_case("bad-name-hidden", ".bad-name-hidden.json", r"hidden file"),
        _name_case("bad-name-upper-suffix", "bad-name-upper-suffix.JSON", r"suffix '\.JSON' is not '\.json'"),
        _name_case("bad-name-mixed-suffix", "bad-name-mixed-suffix.Json", r"suffix '\.Json' is not '\.json'"),
        _name_case("bad-name-backup", "bad-name-backup.json.bak", r"does not end in '\.json'"),
        _name_case("bad-name-trailing-space", "bad-name-trailing-space.json ", r"does not end in '\.json'"),
        _name_case("bad-name-editor-swap", ".bad-name-editor-swap.json.swp", r"hidden file"),
        _name_case("bad-name-not-utf8", "bad-name-not-utf8-\udcff.json", r"not valid UTF-8"),
        # --- content a table cannot hold or a reader cannot trust -----------------------------
        _text_case("bad-dup-key-top", '"formula": "Qz2Lm (invented)"',
                   '"formula": "Qz2Lm (invented)", "formula": "other"', "formula", r"more than once"),
        _text_case("bad-dup-key-mass", '"isotropic_me": 0.55', '"isotropic_me": 0.55, "isotropic_me": 5.5',
                   "valleys[0].mass.isotropic_me", r"more than once"),
        _text_case("bad-dup-key-layer", '"1": -5.9', '"1": -5.9, "1": -2.0', "valleys[0].edge_ev.1",
                   r"more than once"),
        _text_case("bad-dup-key-id", '"id": "bad-dup-key-id"', '"id": "bad-dup-key-id", "id": "other"', "id",
                   r"more than once"),
        _text_case("bad-surrogate-formula", "Qz2Lm (invented)", "Qz2Lm \\ud800 (invented)", "formula",
                   r"U\+D800 .*lone UTF-16 surrogate"),
        _text_case("bad-surrogate-low-label", '"label": "G"', '"label": "\\udfff"', "valleys[1].label",
                   r"U\+DFFF .*surrogate"),
        _text_case("bad-surrogate-reversed-pair", "Qz2Lm (invented)", "\\udc00\\ud800", "formula",
                   r"U\+DC00 .*surrogate"),
        _text_case("bad-surrogate-provenance", "SYNTHETIC test", "SYNTHETIC \\udbff test", "provenance",
                   r"U\+DBFF .*surrogate"),
        _text_case("bad-surrogate-reference", "vacuum level", "vacuum \\ud834level", "energy_reference",
                   r"surrogate"),
        _text_case("bad-surrogate-key", '"formula":', '"\\ud800formula":', "(record)", r"a key holds .*surrogate"),
        # --- every layer count checked in both bands (given or modelled) ----------------------
        _json_case("bad-gap-valence-only-layer", _set("valleys[0].edge_ev.2", -3.0), "valleys[0].edge_ev.2",
                   r"no gap at 2 layers: .*from the layer model", "normalise",
                   note="valence edge for N=2 in one band only"),
        _json_case("bad-gap-conduction-only-layer", _set("valleys[2].edge_ev.3", -7.0), "valleys[2].edge_ev.3",
                   r"no gap at 3 layers", "normalise"),
        _json_case("bad-gap-scissor-closes", _set("scissor_ev", -2.5), "valleys[0].edge_ev.1",
                   r"no gap at 1 layer: .*scissor", "normalise"),
        _json_case("bad-gap-layer-six", _set("valleys[1].edge_ev.6", -3.5), "valleys[1].edge_ev.6",
                   r"no gap at 6 layers", "normalise"),
        # --- more structure and type errors -----------------------------------------------------
        _json_case("bad-root-null", lambda r: None, "(record)", r"not of type 'object'"),
        _json_case("bad-root-string", lambda r: None, "(record)", r"not of type 'object'"),
        _json_case("bad-energy-reference-empty", _set("energy_reference", ""), "energy_reference",
                   r"should be non-empty|too short"),
        _json_case("bad-formula-too-long", _set("formula", "Qz" * 61), "formula", r"too long"),
        _json_case("bad-band-name", _set("valleys[1].band", "valance"), "valleys[1].band", r"is not one of"),
        _json_case("bad-frame-unknown", _set("dielectric.frame", "lab"), "dielectric.frame", r"is not one of"),
        _json_case("bad-tensor-two-rows", _set("dielectric.electronic", [[14.0, 0.0, 0.0], [0.0, 14.0, 0.0]]),
                   "dielectric.electronic", r"too short|should be non-empty|expected"),
        _json_case("bad-id-too-long", _set("id", "x" * 81), "id", r"does not match"),
        _json_case("bad-missing-format", _delete("record_format"), "(record)", r"'record_format' is a required"),
        _json_case("bad-valleys-empty", _set("valleys", []), "valleys", r"too short|should be non-empty"),
        _json_case("bad-label-space", _set("valleys[0].label", "K point"), "valleys[0].label", r"does not match"),
        _json_case("bad-scissor-absurd", _set("scissor_ev", 50.0), "scissor_ev", r"outside"),
        _json_case("bad-normal-in-layer-frame", _set("dielectric.normal", [0, 0, 1]), "dielectric.normal",
                   r"only meaningful with frame 'crystal'"),
        _json_case("bad-screening-both", _set("monolayer_screening", {"polarizability_2d_angstrom": 6.0,
                                                                      "screening_length_angstrom": 40.0}),
                   "monolayer_screening", r"not both"),
        _json_case("bad-screening-uncertainty-only", _set("monolayer_screening", {"relative_uncertainty": 0.1}),
                   "monolayer_screening", r"give 'polarizability_2d_angstrom' or 'screening_length_angstrom'"),
        _json_case("bad-angle-without-principal", _set("valleys[0].mass.angle_deg", 30.0),
                   "valleys[0].mass.angle_deg", r"only meaningful with 'principal_me'"),
        _json_case("bad-mass-tensor-negative", _set("valleys[1].mass", {"tensor_me": [[-0.5, 0.0], [0.0, 0.5]]}),
                   "valleys[1].mass.tensor_me", r"^principal mass <= 0 \(-0\.5 m_e\)$"),
        _json_case("bad-perpendicular-mass-zero", _set("valleys[2].mass.perpendicular_me", 0.0),
                   "valleys[2].mass.perpendicular_me", r"<= 0"),
        _json_case("bad-edge-uncertainty-negative", _set("valleys[0].edge_uncertainty_ev", -0.1),
                   "valleys[0].edge_uncertainty_ev", r"outside"),
        _json_case("bad-static-indefinite",
                   _set("dielectric.static", [[20.0, 0.0, 0.0], [0.0, -20.0, 0.0], [0.0, 0.0, 8.0]]),
                   "dielectric.static", r"definite"),
        _json_case("bad-samples-length-mismatch",
                   lambda r: (_samples(8)(r), r["valleys"][2]["band_samples"]["energy_ev"].pop()),
                   "valleys[2].band_samples", r"8 k points but 7 energies"),
        # --- structures that are not regular files, too large, or not layered -------------------
        Case("bad-cif-case-mismatch", "structure_file",
             r"'bad-cif-case-mismatch\.cif' not found in structures/ \('bad-cif-case-mismatch\.CIF' exists; "
             r"file names are case-sensitive\)", "contract",
             {"entries/bad-cif-case-mismatch.json": _dump(_mutated("bad-cif-case-mismatch", lambda r: (
                 r.update(structure_file="bad-cif-case-mismatch.cif"), r.pop("layer_spacing_angstrom"),
                 r.pop("inplane_lattice_angstrom")))),
              "structures/bad-cif-case-mismatch.CIF": ROCK_SALT_CIF},
             note="the CIF's suffix differs in case from the name the record gives"),
        Case("bad-cif-hidden", "structure_file", r"'\.bad-cif-hidden\.cif': hidden file", "contract",
             {"entries/bad-cif-hidden.json": _dump(_mutated("bad-cif-hidden", lambda r: (
                 r.update(structure_file=".bad-cif-hidden.cif"), r.pop("layer_spacing_angstrom"),
                 r.pop("inplane_lattice_angstrom")))),
              "structures/.bad-cif-hidden.cif": ROCK_SALT_CIF},
             note="a hidden structure file is never read, even when a record names it"),
        _cif_case("bad-cif-directory", Special("directory"), "structure_file",
                  r"referenced structure 'bad-cif-directory\.cif' is a directory, not a file", "contract",
                  "a folder named like a CIF"),
        _cif_case("bad-cif-fifo", Special("fifo"), "structure_file", r"is a named pipe \(FIFO\)", "contract",
                  "would block a plain open()"),
        _cif_case("bad-cif-dangling-link", Special("symlink", "gone.cif"), "structure_file",
                  r"dangling symbolic link", "contract", "link to a removed file"),
        _cif_case("bad-cif-link-dev-zero", Special("symlink", "/dev/zero"), "structure_file", r"is a device",
                  "contract", "endless"),
        _cif_case("bad-cif-huge", b"#" * HUGE_CIF_BYTES, "structure_file", r"larger than the 5000000-byte limit",
                  "contract", "beyond the reader's limit"),
        _cif_case("bad-cif-non-layered", ROCK_SALT_CIF, "layer_spacing_angstrom",
                  r"shows no 2D-bonded layers \(dimensionality 3\) to derive it from", "normalise",
                  "a 3D-bonded crystal (rock salt) where a layered one was expected"),
        _cif_case("bad-cif-nul", b"data_x\n\x00\x00_cell_length_a 3\n", "structure_file", r"NUL", "structure",
                  "binary NUL bytes"),
        _cif_case("bad-cif-two-blocks", ROCK_SALT_CIF + b"\n" + ROCK_SALT_CIF.replace(b"data_rock_salt_synthetic",
                                                                                      b"data_second"),
                  "structure_file", r"2 structures \(data blocks\)", "structure", "two data blocks"),
        _cif_case("bad-cif-no-cell", b"data_x\nloop_\n_atom_site_label\n_atom_site_type_symbol\n"
                  b"_atom_site_fract_x\n_atom_site_fract_y\n_atom_site_fract_z\nNa1 Na 0 0 0\n",
                  "structure_file", r"no cell parameter", "structure", "atoms without a cell"),
    ]
    # Numbers that json.loads turns into inf (1e999) or an int too large for a float.
    overflow = {
        "bad-mass-exponent-overflow": ("0.55", "1e999"),
        "bad-mass-huge-integer": ("0.55", "1" + "0" * 400),
        "bad-spacing-exponent-overflow": ("6.4", "1e999"),
        "bad-eps-exponent-overflow": ("14.0", "-1e999"),
        "bad-edge-exponent-overflow": ("-5.9", "-1e999"),
    }
    roots = {"bad-array-not-object": [valid_record("bad-array-not-object")], "bad-root-null": None,
             "bad-root-string": "bad-root-string"}
    for i, case in enumerate(out):
        if case.stem in overflow:
            out[i] = Case(case.stem, case.field, case.reason, case.stage,
                          {case.entry_path: _replace_text(case.stem, *overflow[case.stem])})
        elif case.stem in roots:
            out[i] = Case(case.stem, case.field, case.reason, case.stage, {case.entry_path: _dump(roots[case.stem])})
    # Two files whose names differ only in case: same shard, both rejected, each naming the other.
    out.append(Case("dup-case", "id", r"duplicate identifier: dup-case\.json and Dup-Case\.json", "duplicate",
                    {"entries/Dup-Case.json": _dump(valid_record("Dup-Case")),
                     "entries/dup-case.json": _dump(valid_record("dup-case"))}))
    if include_huge:
        out.append(_raw_case("bad-huge-file", _huge_record("bad-huge-file"), "(file)", r"larger than"))
    return out


#: Valid records written beside the corpus that must be screened (edge cases, not errors).
def valid_extras() -> dict[str, bytes | Special]:
    return {
        "entries/ok-utf8-bom.json": b"\xef\xbb\xbf" + _dump(valid_record("ok-utf8-bom")),
        "entries/ok-crlf.json": _dump(valid_record("ok-crlf")).replace(b"\n", b"\r\n"),
        # a character outside the Basic Multilingual Plane, escaped as a (valid) surrogate pair
        "entries/ok-surrogate-pair.json": _replace_text("ok-surrogate-pair", "Qz2Lm (invented)",
                                                        "Qz2Lm \\ud83d\\ude00 (invented)"),
        # formula text a spreadsheet would take for a formula: screened, neutralised in CSV
        "entries/ok-formula-like-text.json": _dump(_mutated("ok-formula-like-text", _set("formula", "=1+1"))),
        # control characters are storable text: screened (and escaped wherever they are shown)
        "entries/ok-control-characters.json": _replace_text("ok-control-characters", "Qz2Lm (invented)",
                                                            "Qz2Lm\\u0000\\u001b[31m\\u202e (invented)"),
        # a link to a regular file elsewhere is read like the file
        "archive/ok-linked.json": _dump(valid_record("ok-linked")),
        "entries/ok-linked.json": Special("symlink", "../archive/ok-linked.json"),
    }


def write_corpus(campaign: Path, include_huge: bool = True) -> tuple[list[Case], list[str]]:
    """Write every case (and the valid extras) into ``campaign``; return the cases and valid stems."""
    campaign = Path(campaign)
    for sub in ("entries", "structures"):
        (campaign / sub).mkdir(parents=True, exist_ok=True)
    all_cases = cases(include_huge)
    valid = [Path(p).stem for p in valid_extras() if p.startswith("entries/")]
    (campaign / "archive").mkdir(exist_ok=True)
    for case in all_cases:
        for rel, content in case.files.items():
            if isinstance(content, Special):
                content.create(campaign / rel)
            else:
                (campaign / rel).write_bytes(content)
        valid.extend(case.valid_stems)
    for rel, content in valid_extras().items():
        if isinstance(content, Special):
            content.create(campaign / rel)
        else:
            (campaign / rel).write_bytes(content)
    return all_cases, valid


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--out", type=Path, required=True, help="campaign folder to add the corpus to")
    parser.add_argument("--no-huge", action="store_true", help="skip the > 2 MB record")
    parser.add_argument("--list", action="store_true", help="print stem, stage, field of every case")
    args = parser.parse_args()
    all_cases, valid = write_corpus(args.out, include_huge=not args.no_huge)
    if args.list:
        for c in all_cases:
            print(f"{c.source_file:36s} {c.stage:10s} {c.field}")
    print(f"{len(all_cases)} malformed cases, {len(valid)} valid extras written to {args.out}")


if __name__ == "__main__":
    main()
