"""Orchestration of the workflow stages: files in, tables out.

This layer sits between the Snakemake adapters (workflow/scripts) and the
library: it reads files through :mod:`lamellume.io`, keeps the per-record
result cache, calls the pure modules and writes tables. It holds no physics.

One shard job is :func:`run_shard_job`: read each record and its CIF
(:mod:`lamellume.io`), check and normalise it (:func:`lamellume.intake.check_and_normalise`),
screen every compound at once (:func:`lamellume.screen.screen_entries`), then
propagate the uncertainties (:func:`run_propagation`) from the frames in memory.
The per-record caches live in :mod:`lamellume.shard_cache`.
"""

from __future__ import annotations

import logging
import os
from pathlib import Path
from typing import Mapping, Sequence

import numpy as np
import pandas as pd

from lamellume import contract, ingest, intake, io, provenance
from lamellume.keldysh import KeldyshTable
from lamellume.tables import stage_words
from lamellume.shard_cache import (CONTEXT_STAGES, SHARD_TABLES, PropagationCache, ShardCache,  # noqa: F401
                                    is_in, record_keys)

log = logging.getLogger("lamellume")

#: Reject reasons a shard passes on for the console summary (the rest are in the rejects table).
REASONS_SHOWN = 3

REJECT_COLUMNS = ["entry_id", "source_file", "field", "reason", "stage",
                  "input_hash", "physics_hash", "code_version"]


def _empty_rejects() -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series(dtype="string") for c in REJECT_COLUMNS})


def _reject_rows(stem: str, source: str, problems: Sequence[contract.Problem], stage: str,
                 input_hash: str, stamps: Mapping[str, str]) -> list[dict]:
    stem, source = io.printable_name(stem), io.printable_name(source)
    return [{"entry_id": stem, "source_file": source, "field": p.field, "reason": p.reason,
             "stage": stage, "input_hash": input_hash, **stamps} for p in problems]


def case_variants(stems: Sequence[str]) -> dict[str, list[str]]:
    """For every stem that equals another one apart from letter case, the others.

    The rule (see README, "Input records"): identifiers that differ only in case
    name the same compound on a case-insensitive file system, so all of them are
    rejected together, each reject naming the others, whatever their content and
    in any listing order. Stems without such a sibling are not in the result.
    """
    groups: dict[str, list[str]] = {}
    for stem in stems:
        groups.setdefault(stem.casefold(), []).append(stem)
    return {stem: sorted(s for s in group if s != stem)
            for group in groups.values() if len(group) > 1 for stem in group}


def _typed(frame: pd.DataFrame) -> pd.DataFrame:
    """Give object columns a string type so empty tables keep a schema (Arrow would say null)."""
    obj = [c for c in frame.columns if frame[c].dtype == object]
    if not obj:
        return frame
    out = frame.copy()
    for c in obj:
        values = out[c]
        if len(values) and values.map(lambda v: isinstance(v, bool) or v is None).all() and values.notna().any():
            out[c] = values.astype("boolean")
        else:
            out[c] = values.astype("str")
    return out


def listed_paths(campaign: str, listing: Mapping, kind: str) -> list[str]:
    """Paths of the files of a campaign listing (``kind``: "entries" or "structures").

    ``listing`` is the JSON the workflow writes per shard (or for the whole
    campaign): rows of (file name, size, modification time) per folder.
    """
    return [os.path.join(campaign, kind, row[0]) for row in listing.get(kind, [])]


def _keldysh_table(table: str | KeldyshTable) -> KeldyshTable:
    """The Rytova-Keldysh table itself, or loaded from its file."""
    return table if isinstance(table, KeldyshTable) else KeldyshTable.from_arrays(io.load_arrays(table))


def run_shard(entry_paths: Sequence[str], campaign: str, settings: Mapping, table: str | KeldyshTable,
              cache_dir: str, outputs: Mapping[str, str]) -> dict[str, int]:
    """Validate, normalise and screen the records of one shard; write its tables.

    Returns counts of screened, rejected and reused records (see :func:`screen_shard`).
    """
    return screen_shard(entry_paths, campaign, settings, table, cache_dir, outputs)[0]


#: Records read, then checked and normalised together by :func:`check_records` (bounds the
#: parsed records held at once; the shared work pays off well below this).
RECORDS_TOGETHER = 500


def check_records(entry_paths: Sequence[str], structures_dir: Path, settings: Mapping, stamps: Mapping[str, str],
                  checker: contract.RecordChecker, geometry_of, reuse=lambda stem, input_hash: False,
                  ) -> tuple[list[dict], list[dict], list[dict]]:
    """Read and check every record (and its CIF) as the screen does: the reject stages in order.

    The one implementation of the checks, used by the shard job (:func:`screen_shard`)
    and by the validate-only target (:func:`validate_campaign`). ``reuse(stem,
    input_hash)`` tells records whose rows come from a cache (not checked again);
    ``geometry_of`` analyses a CIF (see :func:`lamellume.intake.check_and_normalise`).

    Returns
    -------
    entry rows, valley rows and reject rows of the checked records (gapless ones rejected).
    """
    max_layers = settings["layers"]["max_layers"]
    new_entries, new_valleys, reject_rows = [], [], []
    readable = [p for p in entry_paths if io.skip_reason(os.path.basename(p), "entries") is None]
    siblings = case_variants([Path(p).stem for p in readable])
    # Read up to RECORDS_TOGETHER records (reject rows kept in file order: a list of rows
    # or the index of a record to check), then check and normalise the read ones together.
    slots: list[list[dict] | int] = []
    pending: list[intake.Pending] = []

    def flush() -> None:
        outcomes = intake.check_and_normalise_many(pending, checker=checker, settings=settings,
                                                   geometry_of=geometry_of)
        for slot in slots:
            if not isinstance(slot, int):
                reject_rows.extend(slot)
                continue
            item, outcome = pending[slot], outcomes[slot]
            if outcome.stage:
                reject_rows.extend(_reject_rows(item.stem, item.source, outcome.problems, outcome.stage,
                                                item.input_hash, stamps))
                continue
            new_entries.append({**outcome.entry, **stamps})
            new_valleys.extend({**v, **stamps} for v in outcome.valleys)
        slots.clear()
        pending.clear()

    for path in sorted(entry_paths):
        stem = Path(path).stem
        source = os.path.basename(path)
        skipped = io.skip_reason(source, "entries")
        if skipped:  # listed so the user sees it, never opened
            slots.append(_reject_rows(stem, source, [contract.Problem("(file name)", skipped)], "skipped",
                                      "", stamps))
            continue
        raw = io.read_record(path)
        cif_bytes, cif_hash, cif_problem = None, "", "file not found"
        if raw.error is None and isinstance(raw.data, dict) and isinstance(raw.data.get("structure_file"), str):
            name = raw.data["structure_file"]
            if "/" not in name and "\\" not in name and not name.startswith("."):
                cif_bytes, cif_problem = io.read_text_limited(structures_dir / name)
                if cif_bytes is not None:
                    cif_hash = io.sha256_bytes(cif_bytes)
            elif name.startswith("."):
                cif_problem = io.skip_reason(name, "structures")
        input_hash = io.sha256_bytes((raw.sha256 + cif_hash).encode())[:32]

        if stem in siblings:
            others = ", ".join(f"{s}.json" for s in siblings[stem])
            slots.append(_reject_rows(stem, source, [contract.Problem(
                "id", f"duplicate identifier: {source} and {others} differ only in letter case; all of them "
                      "are rejected until one is renamed or removed")], "duplicate", input_hash, stamps))
            continue
        if reuse(stem, input_hash):
            continue
        slots.append(len(pending))
        pending.append(intake.Pending(raw, stem, source, input_hash, cif_bytes, cif_hash, cif_problem))
        if len(pending) == RECORDS_TOGETHER:
            flush()
    flush()

    new_entries, new_valleys, gapless = ingest.without_gapless(
        new_entries, new_valleys, max_layers=max_layers, fit_exponent=bool(settings["layers"]["fit_exponent"]))
    for entry, problems in gapless:
        reject_rows += _reject_rows(entry["entry_id"], entry["source_file"], problems, "normalise",
                                    entry["input_hash"], stamps)
    return new_entries, new_valleys, reject_rows


def _analyse_structure(cif_bytes: bytes, cif_hash: str) -> tuple[object, str | None]:
    """Layer geometry of a CIF or the analysis error (no cache: the validate-only target)."""
    from lamellume import structure  # pymatgen: imported only when a CIF is analysed

    try:
        return structure.analyse_cif_text(cif_bytes), None
    except structure.StructureError as exc:
        return None, str(exc)


def validate_campaign(entry_paths: Sequence[str], campaign: str, settings: Mapping) -> tuple[pd.DataFrame, int]:
    """Check a campaign's records without screening: (reject rows, number of record files listed).

    The checks of the screen (:func:`check_records`: file reading, duplicate
    identifiers, schema and physical checks, CIF analysis, normalisation, a gap at
    every layer count), nothing else: no exciton model, no cache.
    """
    checker = contract.RecordChecker(io.load_schema("entry.schema.json"))
    _, _, rows = check_records(entry_paths, Path(campaign) / "structures", settings, {}, checker,
                               _analyse_structure)
    rejects = pd.DataFrame(rows) if rows else _empty_rejects()
    rejects = rejects[[c for c in ("entry_id", "source_file", "stage", "field", "reason") if c in rejects.columns]]
    return rejects.sort_values(["entry_id", "field"], kind="stable").reset_index(drop=True), len(entry_paths)


def validation_report(rejects: pd.DataFrame, listed: int, campaign: str, csv_path: str, shown: int = 40) -> str:
    """The validate-only target's console report: counts, then one line per problem (the first ``shown``)."""
    bad = int(rejects["entry_id"].nunique()) if len(rejects) else 0
    files = "record file" if listed == 1 else "record files"
    lines = [f"lamellume: checked {listed} {files} of {campaign}: {listed - bad} pass every check, "
             f"{bad} would be rejected (nothing was screened)."]
    for row in rejects.head(shown).to_dict("records"):
        lines.append(f"  {row['source_file']}: {row['field']}: {row['reason']} "
                     f"[{stage_words(row['stage'])}]")
    if len(rejects) > shown:
        lines.append(f"  ... and {len(rejects) - shown} more problems")
    if len(rejects):
        lines.append(f"  every problem: {csv_path}")
    return "\n".join(lines) + "\n"


def screen_shard(entry_paths: Sequence[str], campaign: str, settings: Mapping, table: str | KeldyshTable,
                 cache_dir: str, outputs: Mapping[str, str], survival: Mapping | None = None,
                 ) -> tuple[dict[str, int], dict[str, pd.DataFrame]]:
    """Validate, normalise and screen the records of one shard; write its tables.

    Parameters
    ----------
    entry_paths : record files of this shard.
    campaign : campaign folder (its structures/ holds the CIFs).
    settings : the physics config sections (see workflow/rules/common.smk).
    table : Keldysh table, or its file (.npz) built by the keldysh_table rule.
    cache_dir : folder of this shard's per-record cache (:class:`lamellume.shard_cache.ShardCache`).
    outputs : paths for 'entries', 'valleys', 'rejects', 'long', 'wide'.
    survival : settings with the ``survival`` section; when given, the long table gets
        the temperature-dependent columns (:func:`lamellume.ranking.add_survival`).
        Records with a thermal gap form are screened at the operating temperature of
        ``survival`` (else of ``settings``, else at their calculation's temperature);
        their cached rows are reused only at the same temperature.

    Returns
    -------
    counts : screened, rejected, reused and computed records.
    tables : the five tables as written (for the propagation, without a re-read).
    """
    stamps = {"physics_hash": io.canonical_json_hash(dict(settings))[:16],
              "code_version": stage_code_version()}
    max_layers = settings["layers"]["max_layers"]
    structures_dir = Path(campaign) / "structures"
    checker = contract.RecordChecker(io.load_schema("entry.schema.json"))
    source = settings if survival is None else survival
    temperature_k = float(source["survival"]["temperature_k"]) if "survival" in source else None
    cache = ShardCache(cache_dir, stamps, temperature_k=temperature_k)

    new_entries, new_valleys, reject_rows = check_records(
        entry_paths, structures_dir, settings, stamps, checker, cache.structure_geometry, reuse=cache.reuse)
    entries_new = ingest.typed_frame(new_entries, ingest.ENTRY_COLUMNS + list(stamps))
    valleys_new = ingest.typed_frame(new_valleys, ingest.valley_columns(max_layers) + list(stamps))
    from lamellume import screen  # scipy.special: imported by the shard job only, not by rank or manifest

    long_new, wide_new = screen.screen_entries(entries_new, valleys_new, settings, _keldysh_table(table),
                                               temperature_k=temperature_k)
    for frame in (long_new, wide_new):
        frame["physics_hash"] = stamps["physics_hash"]
        frame["code_version"] = stamps["code_version"]

    rejects_new = pd.DataFrame(reject_rows) if reject_rows else _empty_rejects()
    fresh = {"entries": entries_new, "valleys": valleys_new, "rejects": rejects_new, "long": long_new,
             "wide": wide_new}
    tables = {name: _typed(cache.merged(name, fresh[name])) for name in SHARD_TABLES}
    if survival is not None:
        from lamellume import ranking

        tables["long"] = ranking.add_survival(tables["long"], tables["wide"], survival)
    # The generation ties the five tables together (see ShardCache); it is a
    # digest of their content keys, so identical runs write identical files.
    keys = sorted(set(tables["entries"]["input_hash"]) | set(tables["rejects"]["input_hash"]))
    generation = io.canonical_json_hash([stamps, keys])[:16]
    for name, frame in tables.items():
        io.write_parquet(frame, outputs[name], table_metadata={**stamps, "generation": generation})
    cache.save({name: outputs[name] for name in SHARD_TABLES})
    rejects = tables["rejects"]
    counts = {"records": len(entry_paths), "screened": int(len(tables["entries"])),
              "rejected": int(rejects["entry_id"].nunique()) if len(rejects) else 0,
              "reused": len(cache.reused), "computed": len(new_entries),
              "reasons": [f"{r.source_file}: {r.field}: {r.reason}" for r in rejects.head(REASONS_SHOWN).itertuples()]}
    log.info("shard done: %s", counts)
    return counts, tables


def run_shard_job(entry_paths: Sequence[str], campaign: str, physics: Mapping, propagation: Mapping,
                  table_path: str, cache_dir: str, outputs: Mapping[str, str]) -> dict[str, int]:
    """One shard job: screen the records, then propagate their uncertainties.

    The Keldysh table is loaded once, the long table gets the survival columns
    (their one computation), and the screen's entry and valley frames go to the
    propagation in memory. ``outputs`` holds the five screen tables
    and 'uncertainty'.
    """
    table = _keldysh_table(table_path)
    counts, tables = screen_shard(entry_paths, campaign, physics, table, cache_dir,
                                  {k: v for k, v in outputs.items() if k != "uncertainty"}, survival=propagation)
    counts.update({f"propagation_{k}": v for k, v in run_propagation(
        tables["entries"], tables["valleys"], table, propagation, cache_dir, outputs["uncertainty"]).items()})
    return counts


def _concat(paths: Sequence[str]) -> pd.DataFrame:
    """Shard tables stacked in the given order (as Arrow, then one conversion to pandas)."""
    import pyarrow as pa

    tables = [io.read_arrow(p) for p in paths]
    nonempty = [t for t in tables if t.num_rows]
    if not nonempty:
        return tables[0].to_pandas() if tables else pd.DataFrame()
    if len(nonempty) == 1:
        return nonempty[0].to_pandas()
    try:
        return pa.concat_tables(nonempty).to_pandas()
    except (pa.ArrowInvalid, pa.ArrowTypeError):  # shards typed differently: let pandas promote
        return pd.concat([t.to_pandas() for t in nonempty], ignore_index=True)


def run_rank(inputs: Mapping[str, Sequence[str]], outputs: Mapping[str, str], settings: Mapping,
             config_hash: str) -> dict[str, int]:
    """Combine shard tables, rank, write the final wide table, the rejects and the shortlist.

    The long, entries and valleys tables are joined by
    :func:`lamellume.assemble.run_join` (rule ``join_tables``); ``inputs["long"]``
    is read here only for the rows at the target layer count and environment.
    """
    from lamellume import ranking, shortlist

    rejects = _concat(inputs["rejects"])
    wide = _concat(inputs["wide"]).sort_values("entry_id", kind="stable").reset_index(drop=True)
    probabilities = _concat(inputs["uncertainty"]) if inputs.get("uncertainty") else None
    if len(rejects):
        rejects = rejects.sort_values(["entry_id", "field"], kind="stable").reset_index(drop=True)
    meta = {"config_hash": config_hash}
    target_layers = int(settings["ranking"]["target_layers"])
    environment = settings["ranking"]["environment"]
    # Only the long rows at the target layer count and environment are ranked (their survival
    # columns come from the shard job); the whole long table is joined by rule join_tables.
    import pyarrow.compute as pc

    targets = []
    for path in inputs["long"]:  # only the columns rank() reads, not the whole of the largest table
        part = io.read_arrow(path, columns=list(ranking.TARGET_KEYS + ranking.TARGET_COLUMNS))
        chosen = pc.and_(pc.equal(part.column("layers"), target_layers),
                         pc.equal(part.column("environment"), environment))
        targets.append(part.filter(chosen).to_pandas())
    target = pd.concat(targets, ignore_index=True) if targets else pd.DataFrame()
    ranked = ranking.rank(target, wide, settings, probabilities)
    ranked["config_hash"] = config_hash
    io.write_parquet(rejects, outputs["rejects"], table_metadata=meta)
    io.write_csv(rejects, outputs["rejects_csv"])
    io.write_parquet(ranked, outputs["wide"], table_metadata=meta)
    io.write_csv(shortlist.shortlist_table(ranked, settings), outputs["shortlist"])
    counts = {"screened": len(wide), "rejected": int(rejects["entry_id"].nunique()) if len(rejects) else 0,
              "candidates": int(ranked["meets_all_criteria"].sum()) if len(ranked) else 0}
    log.info("ranked: %s", counts)
    return counts


def package_versions() -> dict[str, str]:
    """Versions of the packages the screen depends on."""
    from importlib import metadata

    out = {}
    for name in ("snakemake", "numpy", "scipy", "pandas", "pyarrow", "pymatgen", "jsonschema", "PyYAML"):
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = "not installed"
    import platform

    out["python"] = platform.python_version()
    return out


def git_version(workdir: str) -> str:
    """``git describe`` of the workflow checkout, or 'unknown' outside git."""
    import subprocess

    try:
        res = subprocess.run(["git", "-C", workdir, "describe", "--always", "--dirty", "--tags"],
                             capture_output=True, text=True, timeout=10, check=False)
    except (OSError, subprocess.SubprocessError):
        return "unknown"
    return res.stdout.strip() or "unknown"


def write_manifest(entry_paths: Sequence[str], structure_paths: Sequence[str], wide_path: str,
                   config: Mapping, config_hash: str, workdir: str, output: str,
                   settings_output: str | None = None, campaign: str = "") -> None:
    """Run manifest: input hashes, config and its hash, code version, package versions, counts.

    With ``settings_output``, also the shortlist's settings sheet
    (:func:`lamellume.shortlist.settings_table`), stamped like the manifest.
    """
    import datetime

    from lamellume import shortlist

    wide = io.read_parquet(wide_path)
    hashes: dict[str, dict[str, str]] = {"entries": {}, "structures": {}}
    not_read: dict[str, str] = {}
    for kind, paths in (("entries", entry_paths), ("structures", structure_paths)):
        for p in paths:
            digest, reason = io.campaign_file_digest(p, kind)
            name = io.printable_name(os.path.basename(p))
            if digest is None:
                not_read[f"{kind}/{name}"] = reason
            else:
                hashes[kind][name] = digest
    manifest = {
        "tool": "lamellume",
        "written_utc": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
        "code_version": io.library_digest(),
        "screen_code_version": stage_code_version(),
        "git": git_version(workdir),
        "config_hash": config_hash,
        "config": dict(config),
        "packages": package_versions(),
        "inputs": hashes,
        # listed files that were skipped (near-miss names) or could not be read, with the reason
        "not_read": not_read,
        "counts": {"records": sum(io.skip_reason(os.path.basename(p), "entries") is None for p in entry_paths),
                   "screened": len(wide),
                   "candidates": int(wide["meets_all_criteria"].sum()) if len(wide) else 0},
        "cautions": CAUTIONS,
    }
    io.write_json(manifest, output)
    if settings_output:
        stamps = {"campaign": campaign, "written_utc": manifest["written_utc"], "config_hash": config_hash,
                  "code_version": manifest["code_version"], "git": manifest["git"], **manifest["counts"]}
        io.write_csv(shortlist.settings_table(config, stamps), settings_output)


#: Cautions shown with every output handed to experimental teams.
CAUTIONS = [
    "All numbers are model estimates from first-principles inputs, not measurements.",
    "Binding energies carry the uncertainty of the masses, dielectric constants and screening model; "
    "treat differences below about 20 % as not significant.",
    "Follow your local laboratory safety rules when preparing samples, handling chemicals and using lasers; "
    "these results do not replace a licensed safety assessment.",
]


def stage_code_version() -> str:
    """Code version of the shard stage (screen and propagation): a digest of every library
    module this module can import, followed through the import graph
    (:func:`lamellume.provenance.code_version`), and of the schemas."""
    return provenance.code_version(__name__.rsplit(".", 1)[-1])


def run_propagation(entries: str | pd.DataFrame, valleys: str | pd.DataFrame, table: str | KeldyshTable,
                    settings: Mapping, cache_dir: str, output: str) -> dict[str, int]:
    """Monte Carlo propagation for one shard, re-sampling only records that changed.

    ``entries`` and ``valleys`` are the shard's normalised tables (frames, or
    their Parquet files). Each record's random stream depends only on the
    campaign seed and its identifier, so a cached row equals a fresh one
    whenever the record's ``input_hash`` and ``physics_hash``, the settings and
    the code are the same (:class:`lamellume.shard_cache.PropagationCache`).
    """
    from lamellume import uncertainty

    entries = io.read_parquet(entries) if isinstance(entries, (str, os.PathLike)) else entries
    valleys = io.read_parquet(valleys) if isinstance(valleys, (str, os.PathLike)) else valleys
    stamps = {"settings_hash": io.canonical_json_hash(dict(settings))[:16],
              "code_version": stage_code_version()}
    cache = PropagationCache(cache_dir, stamps)
    keys = record_keys(entries)
    reused = cache.reusable(set(keys))
    todo = entries[~is_in(keys, set(record_keys(reused)) if len(reused) else set())]
    fresh = uncertainty.propagate_uncertainty(todo, valleys[is_in(valleys["entry_id"], set(todo["entry_id"]))],
                                              settings, _keldysh_table(table))
    fresh["physics_hash"] = todo.set_index("entry_id").loc[fresh["entry_id"], "physics_hash"].to_numpy() \
        if len(fresh) else pd.Series(dtype="string")
    frame = pd.concat([f for f in (fresh, reused) if len(f)] or [fresh], ignore_index=True)
    frame = frame.sort_values("entry_id", kind="stable").reset_index(drop=True)
    io.write_parquet(frame, output, table_metadata=stamps)
    cache.save(output)
    counts = {"computed": len(fresh), "reused": len(reused)}
    log.info("propagation done: %s", counts)
    return counts


def _attribution_keys(frame: pd.DataFrame) -> np.ndarray:
    """Per-record cache key of the attribution caches: the record's key and its shortlist cut key."""
    return (record_keys(frame) + "\0" + frame["shortlist_cut"].astype(str)).to_numpy(dtype=object)


def _reusable_rows(path: Path, stamps: Mapping, keys: set) -> pd.DataFrame:
    """Rows of a per-record attribution cache written with ``stamps`` whose key is in ``keys``
    (column ``_key`` added); no rows when the cache is missing or was written otherwise."""
    if not path.exists() or io.parquet_metadata(path) != {**io.parquet_metadata(path), **stamps}:
        return pd.DataFrame()
    old = io.read_parquet(path)
    if not len(old):
        return pd.DataFrame()
    old = old.assign(_key=_attribution_keys(old))
    return old[is_in(old["_key"], keys)]


def run_attribution(entries_path: str, valleys_path: str, uncertainty_path: str, table_path: str,
                    settings: Mapping, cache_dir: str, output: str, ranked_path: str | None = None) -> dict[str, int]:
    """Variance-based attribution of one shard's borderline verdicts, re-computing only changed records.

    A record is attributed when its ``p_meets_all`` (the propagation's table)
    or its ``p_on_shortlist`` (:func:`lamellume.refinement.shortlist_probability`,
    against the cut keys of the ranked table at ``ranked_path``) lies in
    ``refinement.band``, for the verdicts of ``refinement.verdicts``. Each
    record's design depends only on the campaign seed and its identifier, so a
    cached row equals a fresh one whenever ``input_hash``, ``physics_hash``, the
    record's shortlist cut key, the settings and the code match.
    """
    from lamellume import refinement

    entries = io.read_parquet(entries_path)
    probabilities = io.read_parquet(uncertainty_path, columns=["entry_id", "p_meets_all"])
    stamps = {"settings_hash": io.canonical_json_hash(dict(settings))[:16],
              "code_version": stage_code_version()}
    ref = settings["refinement"]
    verdicts = set(ref.get("verdicts", ["meets_all"])) if ref["enabled"] else set()
    if "on_shortlist" in verdicts and settings["ranking"].get("order_by", "score") != "score":
        log.info("shortlist membership is not attributed: with ranking.order_by: %s the order uses a probability "
                 "that one Monte Carlo sample does not have", settings["ranking"]["order_by"])
        verdicts.discard("on_shortlist")
    if "on_shortlist" in verdicts and ranked_path is None:
        raise ValueError("attributing shortlist membership needs the ranked table")
    entries = entries.assign(p_meets_all=entries["entry_id"].map(
        probabilities.set_index("entry_id")["p_meets_all"]).to_numpy(dtype=float))
    cuts = None
    if "on_shortlist" in verdicts:
        ranked = io.read_parquet(ranked_path, columns=["entry_id", "rank", "meets_all_criteria", "score"])
        campaign = refinement.shortlist_cuts(ranked, int(settings["ranking"]["shortlist_size"]))
        entries = entries[is_in(entries["entry_id"], set(ranked["entry_id"].astype(str)))]   # ranked ones only
        cuts = {str(e): campaign.against(str(e)) for e in entries["entry_id"]}
        entries = entries.assign(shortlist_cut=[refinement.cut_text(cuts[str(e)]) for e in entries["entry_id"]])
    else:
        entries = entries.assign(shortlist_cut="")
    entries = entries.assign(_key=_attribution_keys(entries))
    chosen = set(entries["entry_id"][refinement.borderline(entries["p_meets_all"], ref["band"])]) \
        if "meets_all" in verdicts else set()

    valleys = None
    table = None

    def load():
        nonlocal valleys, table
        if valleys is None:
            valleys = io.read_parquet(valleys_path)
            table = KeldyshTable.from_arrays(io.load_arrays(table_path))
        return valleys, table

    counts = {"borderline": 0, "computed": 0, "reused": 0}
    # p_on_shortlist of the records not already chosen: N model runs each, cached per record and cut key
    prob_path = Path(cache_dir) / "shortlist_probability.parquet"
    if cuts is not None:
        rest = entries[~is_in(entries["entry_id"], chosen)] if chosen else entries
        outside = refinement.membership_decided(
            rest["p_meets_all"], [None if cuts[str(e)] is None else cuts[str(e)].meets_all for e in rest["entry_id"]],
            ref["band"])
        counts["membership_bounded"] = int(outside.sum())
        rest = rest[~outside]
        known = _reusable_rows(prob_path, stamps, set(rest["_key"])) if len(rest) else pd.DataFrame()
        todo = rest[~is_in(rest["_key"], set(known["_key"]))] if len(known) else rest
        if len(todo):
            v, t = load()
            fresh = refinement.shortlist_probability(todo, v[is_in(v["entry_id"], set(todo["entry_id"]))],
                                                     settings, t, cuts).to_numpy(dtype=float)
            fresh = todo.sort_values("entry_id", kind="stable").assign(p_on_shortlist=fresh)
        else:
            fresh = pd.DataFrame()
        probs = pd.concat([f for f in (known, fresh) if len(f)], ignore_index=True) if len(known) or len(fresh) \
            else pd.DataFrame(columns=list(refinement.PROBABILITY_COLUMNS))
        counts["membership_computed"] = len(fresh)
        counts["membership_reused"] = len(known)
        chosen |= set(probs["entry_id"][refinement.borderline(probs["p_on_shortlist"], ref["band"])])
        probs = refinement._typed(probs, refinement.PROBABILITY_COLUMNS).sort_values("entry_id", kind="stable")
        io.write_parquet(probs, prob_path, units=refinement.UNITS, descriptions=refinement.DESCRIPTIONS,
                         table_metadata=stamps)

    entries = entries[is_in(entries["entry_id"], chosen)] if chosen else entries.iloc[:0]
    cache_path = Path(cache_dir) / "attribution.parquet"
    reused = _reusable_rows(cache_path, stamps, set(entries["_key"])).drop(columns="_key", errors="ignore") \
        if len(entries) else pd.DataFrame()
    done = set(reused["entry_id"]) if len(reused) else set()
    todo = entries[~is_in(entries["entry_id"], done)] if done else entries
    if len(todo):
        v, t = load()
        fresh = refinement.attribute(todo.drop(columns="_key"), v[is_in(v["entry_id"], set(todo["entry_id"]))],
                                     settings, t, cuts=cuts)
    else:
        fresh = refinement.empty_frame()
    frame = pd.concat([f for f in (fresh, reused) if len(f)] or [fresh], ignore_index=True)
    frame = frame.sort_values(["entry_id", "output", "input_group"], kind="stable").reset_index(drop=True)
    io.write_parquet(frame, output, units=refinement.UNITS, descriptions=refinement.DESCRIPTIONS,
                     table_metadata=stamps)
    io.copy_file(output, cache_path)
    counts.update(borderline=len(entries), computed=int(todo["entry_id"].nunique()) if len(todo) else 0,
                  reused=len(done))
    log.info("attribution done: %s", counts)
    return counts


def run_refinement_list(attribution_paths: Sequence[str], settings: Mapping, outputs: Mapping[str, str],
                        config_hash: str) -> int:
    """Join the shards' attribution rows; write them, the ranked refinement list and its CSV."""
    from lamellume import refinement

    frame = _concat(attribution_paths)
    if not len(frame):
        frame = refinement.empty_frame()
    frame = frame.sort_values(["entry_id", "output", "input_group"], kind="stable").reset_index(drop=True)
    ref = settings["refinement"]
    ranked = refinement.refinement_list(frame, effect=ref["effect"], per_entry=int(ref["per_compound"]),
                                        band=ref["band"], verdicts=ref.get("verdicts", ["meets_all"]))
    meta = {"config_hash": config_hash}
    io.write_parquet(frame, outputs["attribution"], units=refinement.UNITS, descriptions=refinement.DESCRIPTIONS,
                     table_metadata=meta)
    io.write_parquet(ranked, outputs["refinement"], units=refinement.UNITS, descriptions=refinement.DESCRIPTIONS,
                     table_metadata=meta)
    io.write_csv(refinement.display_frame(ranked), outputs["csv"])
    log.info("refinement list: %d rows from %d compounds", len(ranked),
             ranked["entry_id"].nunique() if len(ranked) else 0)
    return len(ranked)
