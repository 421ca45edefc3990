#!/usr/bin/env python3
"""Generate the bad-input corpus: malformed campaign records and structures.

Nothing is committed but this script; the corpus is written at test time into
a temporary campaign folder (the > 2 MB record included), so the repository
stays small. Every record is SYNTHETIC: the numbers of the valid template are
invented and each case breaks it in one way.

Each :class:`Case` names the files it writes (relative to the campaign folder),
the stem of the record that must be rejected, the ``field`` that at least one
reject row of that record must carry (exactly) and a regular expression its
``reason`` must match, and the ``stage`` at which the record is rejected:
``read`` (io.read_record), ``contract`` (RecordChecker), ``structure`` (the CIF
analysis) or ``duplicate`` (two identifiers equal without regard to case).
File-level problems carry the field ``(file)``.

Some cases also write valid records that must be screened (``valid_stems``),
e.g. the first of two case-insensitive duplicates.

Usage:
    python tests/data/bad_inputs/make_corpus.py --out /tmp/corpus        # writes entries/, structures/
    python tests/data/bad_inputs/make_corpus.py --out /tmp/corpus --list # also prints the cases
"""

from __future__ import annotations

import argparse
import copy
import json
import random
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

#: Size of the oversized record; the reader's limit is 2,000,000 bytes.
HUGE_RECORD_BYTES = 2_200_000
NOTE = "SYNTHETIC test record from tests/data/bad_inputs/make_corpus.py; invented numbers"


def valid_record(ident: str) -> dict:
    """A small valid record with invented numbers (direct gap at K as a monolayer)."""
    return {
        "record_format": "flakelight-record/1",
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
class Case:
    """One malformed input and what its reject row must say."""

    stem: str
    field: str
    reason: str
    stage: str
    files: dict[str, bytes]
    valid_stems: tuple[str, ...] = ()
    note: str = ""

    @property
    def entry_path(self) -> str:
        return f"entries/{self.stem}.json"


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


def _cif_case(stem: str, cif: bytes | None, field: str, reason: str, stage: str, note: str) -> Case:
    rec = _mutated(stem, lambda r: (r.update(structure_file=f"{stem}.cif"),
                                    r.pop("layer_spacing_angstrom"), r.pop("inplane_lattice_angstrom")))
    files = {f"entries/{stem}.json": _dump(rec)}
    if cif is not None:
        files[f"structures/{stem}.cif"] = cif
    return Case(stem, field, reason, stage, files, note=note)


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
        _raw_case("bad-utf16", json.dumps(valid_record("bad-utf16")).encode("utf-16"), "(file)", r"UTF-8"),
        _raw_case("bad-utf16-be-no-bom", json.dumps(valid_record("bad-utf16-be-no-bom")).encode("utf-16-be"),
                  "(file)", r"invalid JSON|UTF-8", note="ASCII in UTF-16-BE is valid UTF-8 with NUL bytes"),
        _raw_case("bad-latin1", json.dumps(_mutated("bad-latin1", _set("formula", "Qz2Lm\u00e9 (invented)")),
                                           ensure_ascii=False).encode("latin-1"), "(file)", r"UTF-8"),
        _raw_case("bad-binary-junk", bytes(rnd.getrandbits(8) for _ in range(4096)), "(file)", r"UTF-8|invalid JSON"),
        _raw_case("bad-nul-bytes", _dump(valid_record("bad-nul-bytes")).replace(b'"formula"', b'"form\x00ula"'),
                  "(file)", r"invalid JSON"),
        _raw_case("bad-deeply-nested", b"[" * 200_000 + b"]" * 200_000, "(file)", r"invalid JSON|nest|recursion"),
        _raw_case("bad-huge-int-digits", _replace_text("bad-huge-int-digits", "0.55", "1" + "0" * 5000),
                  "(file)", r"invalid JSON|digits"),
        # --- structure and types (JSON Schema) ------------------------------------------------
        _json_case("bad-array-not-object", lambda r: None, "(record)", r"not of type 'object'"),
        _json_case("bad-missing-id", _delete("id"), "(record)", r"'id' is a required property"),
        _json_case("bad-missing-valleys", _delete("valleys"), "(record)", r"'valleys' is a required property"),
        _json_case("bad-missing-dielectric", _delete("dielectric"), "(record)", r"'dielectric' is a required"),
        _json_case("bad-missing-electronic", _delete("dielectric.electronic"), "dielectric",
                   r"'electronic' is a required"),
        _json_case("bad-wrong-format-tag", _set("record_format", "flakelight-record/0"), "record_format",
                   r"flakelight-record/1"),
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
    ]
    # Numbers that json.loads turns into inf (1e999) or an int too large for a float.
    overflow = {
        "bad-mass-exponent-overflow": ("0.55", "1e999"),
        "bad-mass-huge-integer": ("0.55", "1" + "0" * 400),
        "bad-spacing-exponent-overflow": ("6.4", "1e999"),
        "bad-eps-exponent-overflow": ("14.0", "-1e999"),
        "bad-edge-exponent-overflow": ("-5.9", "-1e999"),
    }
    for i, case in enumerate(out):
        if case.stem in overflow:
            out[i] = Case(case.stem, case.field, case.reason, case.stage,
                          {case.entry_path: _replace_text(case.stem, *overflow[case.stem])})
        elif case.stem == "bad-array-not-object":
            out[i] = Case(case.stem, case.field, case.reason, case.stage,
                          {case.entry_path: _dump([valid_record(case.stem)])})
    # Two files whose names differ only in case: same shard, both rejected, each naming the other.
    out.append(Case("dup-case", "id", r"duplicate identifier: dup-case\.json and Dup-Case\.json", "duplicate",
                    {"entries/Dup-Case.json": _dump(valid_record("Dup-Case")),
                     "entries/dup-case.json": _dump(valid_record("dup-case"))}))
    if include_huge:
        out.append(_raw_case("bad-huge-file", _huge_record("bad-huge-file"), "(file)", r"larger than"))
    return out


#: Valid records written beside the corpus that must be screened (edge cases, not errors).
def valid_extras() -> dict[str, bytes]:
    return {
        "entries/ok-utf8-bom.json": b"\xef\xbb\xbf" + _dump(valid_record("ok-utf8-bom")),
        "entries/ok-crlf.json": _dump(valid_record("ok-crlf")).replace(b"\n", b"\r\n"),
    }


def write_corpus(campaign: Path, include_huge: bool = True) -> tuple[list[Case], list[str]]:
    """Write every case (and the valid extras) into ``campaign``; return the cases and valid stems."""
    campaign = Path(campaign)
    for sub in ("entries", "structures"):
        (campaign / sub).mkdir(parents=True, exist_ok=True)
    all_cases = cases(include_huge)
    valid = [Path(p).stem for p in valid_extras()]
    for case in all_cases:
        for rel, content in case.files.items():
            (campaign / rel).write_bytes(content)
        valid.extend(case.valid_stems)
    for rel, content in valid_extras().items():
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
            print(f"{c.stem:32s} {c.stage:10s} {c.field}")
    print(f"{len(all_cases)} malformed cases, {len(valid)} valid extras written to {args.out}")


if __name__ == "__main__":
    main()
