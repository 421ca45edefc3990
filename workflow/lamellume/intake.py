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


@dataclass
class Pending:
    """A read record waiting for its checks (the arguments of :func:`check_and_normalise`)."""

    raw: object
    stem: str
    source: str
    input_hash: str
    cif_bytes: bytes | None
    cif_hash: str
    cif_problem: str | None


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
    item = Pending(raw, stem, source, input_hash, cif_bytes, cif_hash, cif_problem)
    outcome, geometry = _check(item, checker=checker, geometry_of=geometry_of)
    return outcome or _normalise(item, geometry, settings)


def check_and_normalise_many(items: list[Pending], *, checker: contract.RecordChecker, settings: Mapping,
                             geometry_of: Callable[[bytes, str], tuple[object, str | None]]) -> list[Outcome]:
    """:func:`check_and_normalise` of many records, in order, with the same outcomes.

    The numeric work that is the same for every record is done once for all:
    the dielectric tensors pass a shared prefilter
    (:func:`lamellume.contract.clear_tensors`; a record it does not clear is
    checked alone, which writes the messages), and isotropic masses and band
    fits are computed together (:func:`lamellume.ingest.prepare_masses`), as are
    the rotations into the layer frame (:func:`lamellume.ingest.layer_rotations`).
    """
    checked = _check_many(items, checker=checker, geometry_of=geometry_of)
    return _normalise_many(items, checked, settings)


def _check_many(items: list[Pending], *, checker: contract.RecordChecker,
                geometry_of: Callable[[bytes, str], tuple[object, str | None]]) -> list[tuple[Outcome | None, object]]:
    """:func:`_check` of many records: the schema gate one by one, the tensor prefilter for all at once."""
    valid = [item.raw.error is None and checker.is_schema_valid(item.raw.data) for item in items]
    flags = iter(contract.clear_tensors([item.raw.data for item, ok in zip(items, valid) if ok]))
    return [_check(item, checker=checker, geometry_of=geometry_of, schema_valid=ok,
                   tensors_clear=bool(next(flags)) if ok else False) for item, ok in zip(items, valid)]


def _normalise_many(items: list[Pending], checked: list[tuple[Outcome | None, object]],
                    settings: Mapping) -> list[Outcome]:
    """The outcome of each record: its check's, else :func:`_normalise` with masses and rotations
    computed for all records at once."""
    waiting = [(n, geometry) for n, (outcome, geometry) in enumerate(checked) if outcome is None]
    records = [items[n].raw.data for n, _ in waiting]
    normals = [ingest.layer_normal(r, g) for r, (_, g) in zip(records, waiting)]
    prepared = iter(zip(ingest.prepare_masses(records, normals), ingest.layer_rotations(records, normals)))
    return [outcome or _normalise(item, geometry, settings, *next(prepared))
            for item, (outcome, geometry) in zip(items, checked)]


def _check(item: Pending, *, checker: contract.RecordChecker,
           geometry_of: Callable[[bytes, str], tuple[object, str | None]], schema_valid: bool = False,
           tensors_clear: bool = False) -> tuple[Outcome | None, object]:
    """The reading, contract and structure stages: (rejecting outcome or None, layer geometry or None).

    ``schema_valid``: the record is known to pass the schema gate; ``tensors_clear``:
    its tensors are known to pass (:func:`lamellume.contract.clear_tensors`).
    """
    raw = item.raw
    if raw.error is not None:
        return Outcome(problems=[contract.Problem(raw.error_field, raw.error)], stage="read"), None
    why = item.cif_problem
    structure_problem = lambda _name: why  # noqa: E731 - the reason found when the CIF was read
    if schema_valid:
        problems = contract.physical_problems(raw.data, stem=item.stem, structure_problem=structure_problem,
                                              tensors_clear=tensors_clear)
    else:
        problems = checker.check(raw.data, stem=item.stem, structure_problem=structure_problem)
    if problems:
        return Outcome(problems=problems, stage="contract"), None
    geometry = None
    if item.cif_bytes is not None:
        geometry, error = geometry_of(item.cif_bytes, item.cif_hash)
        if error:
            return Outcome(problems=[contract.Problem(
                "structure_file", f"{raw.data['structure_file']}: {error}")], stage="structure"), None
    return None, geometry


def _normalise(item: Pending, geometry, settings: Mapping, prepared: dict | None = None,
               rotation=None) -> Outcome:
    """The normalise stage of a record that passed :func:`_check`."""
    try:
        norm = ingest.normalize(item.raw.data, source_file=item.source, input_hash=item.input_hash,
                                max_layers=settings["layers"]["max_layers"], geometry=geometry,
                                structure_hash=item.cif_hash or None,
                                non_layered=settings["structure"]["non_layered"],
                                reconcile_rel_tol=settings["structure"]["reconcile_rel_tol"], prepared=prepared,
                                rotation=rotation)
    except ingest.Rejected as exc:
        return Outcome(problems=exc.problems, stage="normalise")
    return Outcome(entry=norm.entry, valleys=norm.valleys)
