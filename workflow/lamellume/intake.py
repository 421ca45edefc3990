"""Check and normalise one record: a read record plus its CIF in, normalised rows or problems out.

The pure step of a shard job (no file access: the caller reads the record and
its CIF through :mod:`lamellume.io` and hands in the structure analysis, which
is memoised by content hash in :class:`lamellume.shard_cache.ShardCache`).
The order of the checks is the order of the reject stages:

1. ``read``: the file could not be read or parsed (:func:`lamellume.io.read_record`);
2. ``contract``: the schema and the physical checks (:class:`lamellume.contract.RecordChecker`);
3. ``structure``: the CIF could not be analysed (:mod:`lamellume.structure`);
4. ``normalise``: flattening into the entry and valley rows failed (:func:`lamellume.ingest.normalize`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Mapping

from lamellume import contract, ingest


@dataclass
class Outcome:
    """What became of one record: rows (``stage == ""``) or problems at a stage."""

    entry: dict | None = None
    valleys: list[dict] = field(default_factory=list)
    problems: list[contract.Problem] = field(default_factory=list)
    stage: str = ""


def check_and_normalise(raw, *, stem: str, source: str, input_hash: str, cif_bytes: bytes | None,
                        cif_hash: str, cif_problem: str | None, checker: contract.RecordChecker,
                        settings: Mapping, geometry_of: Callable[[bytes, str], tuple[object, str | None]]) -> Outcome:
    """Check a read record and normalise it into entry and valley rows.

    Parameters
    ----------
    raw : lamellume.io.RawRecord
        The record as read (parsed object or a read error).
    stem, source : identifier (file stem) and file name of the record.
    input_hash : content hash of the record and its CIF (stamped on the rows).
    cif_bytes, cif_hash : the CIF's bytes and hash (None and '' without one).
    cif_problem : why the named CIF could not be read (None if it was).
    checker : the compiled record contract.
    settings : the physics config sections (``layers``, ``structure``).
    geometry_of : ``(cif_bytes, cif_hash) -> (LayerGeometry or None, error or None)``.

    Returns
    -------
    Outcome
    """
    if raw.error is not None:
        return Outcome(problems=[contract.Problem(raw.error_field, raw.error)], stage="read")
    problems = checker.check(raw.data, stem=stem, structure_problem=lambda _name, why=cif_problem: why)
    if problems:
        return Outcome(problems=problems, stage="contract")
    geometry = None
    if cif_bytes is not None:
        geometry, error = geometry_of(cif_bytes, cif_hash)
        if error:
            return Outcome(problems=[contract.Problem(
                "structure_file", f"{raw.data['structure_file']}: {error}")], stage="structure")
    try:
        norm = ingest.normalize(raw.data, source_file=source, input_hash=input_hash,
                                max_layers=settings["layers"]["max_layers"], geometry=geometry,
                                structure_hash=cif_hash or None,
                                non_layered=settings["structure"]["non_layered"],
                                reconcile_rel_tol=settings["structure"]["reconcile_rel_tol"])
    except ingest.Rejected as exc:
        return Outcome(problems=exc.problems, stage="normalise")
    return Outcome(entry=norm.entry, valleys=norm.valleys)
