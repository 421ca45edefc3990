"""Orchestration of the workflow stages: files in, tables out.

This layer sits between the Snakemake adapters (workflow/scripts) and the
library: it reads files through :mod:`flakelight.io`, keeps the per-record
result cache, calls the pure modules and writes tables. It holds no physics.

Per-record cache
----------------
A shard job re-runs when any of its records changes. To keep that cheap, every
result row carries ``input_hash`` (record bytes plus its CIF bytes),
``physics_hash`` (the physics settings) and ``code_version`` (the library
sources). After a shard finishes, its tables are copied to a cache folder; the
next run of the shard reuses the rows whose three stamps still match and
recomputes only the rest. Changing the code or a physics setting changes the
stamps, so nothing stale is ever reused.
"""

from __future__ import annotations

import dataclasses
import logging
import os
from pathlib import Path
from typing import Mapping, Sequence

import numpy as np
import pandas as pd

from flakelight import contract, ingest, io, provenance, screen
from flakelight.keldysh import KeldyshTable

log = logging.getLogger("flakelight")

SHARD_TABLES = ("entries", "valleys", "rejects", "long", "wide")

#: Reject reasons a shard passes on for the console summary (the rest are in the rejects table).
REASONS_SHOWN = 3

REJECT_COLUMNS = ["entry_id", "source_file", "field", "reason", "stage",
                  "input_hash", "physics_hash", "code_version"]


def _is_in(values: pd.Series, members) -> np.ndarray:
    """Boolean mask: which text ``values`` are among ``members`` (Arrow hash lookup, ~5x pandas isin)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    if not len(values):
        return np.zeros(0, dtype=bool)
    mask = pc.is_in(pa.array(values.astype(str), type=pa.large_string()),
                    value_set=pa.array(list(members), type=pa.large_string()))
    return mask.to_numpy(zero_copy_only=False)


def _empty_rejects() -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series(dtype="string") for c in REJECT_COLUMNS})


def _reject_rows(stem: str, source: str, problems: Sequence[contract.Problem], stage: str,
                 input_hash: str, stamps: Mapping[str, str]) -> list[dict]:
    stem, source = io.printable_name(stem), io.printable_name(source)
    return [{"entry_id": stem, "source_file": source, "field": p.field, "reason": p.reason,
             "stage": stage, "input_hash": input_hash, **stamps} for p in problems]


#: Reject stages that depend on other files or on the file's name, not on its content
#: alone: never taken from the per-record cache (always decided afresh).
CONTEXT_STAGES = ("skipped", "duplicate")


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


def _load_cache(cache_dir: Path, stamps: Mapping[str, str]) -> dict[str, pd.DataFrame]:
    """Cached shard tables restricted to rows computed with the current stamps.

    The tables are copied into the cache one after another; a run killed in
    between leaves tables of two generations. Each table carries its
    generation in the file metadata, and a cache whose tables disagree is
    ignored as a whole.
    """
    out = {}
    generations = set()
    for name in SHARD_TABLES:
        path = cache_dir / f"{name}.parquet"
        if not path.exists():
            return {}
        try:
            generations.add(io.parquet_metadata(path).get("generation"))
            frame = io.read_parquet(path)
        except Exception as exc:  # a damaged cache is ignored, never trusted
            log.warning("ignoring unreadable cache %s: %s", path, exc)
            return {}
        if len(frame):
            keep = (frame["physics_hash"] == stamps["physics_hash"]) & (frame["code_version"] == stamps["code_version"])
            frame = frame[keep]
        out[name] = frame
    if len(generations) != 1 or None in generations:
        log.warning("ignoring cache %s: its tables come from different runs", cache_dir)
        return {}
    return out


def _file_key(stem: str, input_hash: str) -> str:
    """Cache key of a record file: its name and its content (record plus CIF bytes).

    Content alone is not enough: a renamed or copied file holds the same bytes
    under another name, and its fate (screened, or rejected for a name that does
    not match its identifier) depends on the name.
    """
    return f"{stem}\0{input_hash}"


def _file_keys(frame: pd.DataFrame) -> pd.Series:
    """:func:`_file_key` of every row of a shard table (``entry_id`` is the file stem)."""
    return frame["entry_id"].astype(str) + "\0" + frame["input_hash"].astype(str)


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


def _structure_geometry(cif_bytes: bytes, cif_hash: str, memo: dict) -> tuple[object, str | None]:
    """Layer geometry of a CIF, memoised by content hash (``memo`` persists between runs)."""
    from flakelight import structure  # pymatgen: imported only when a CIF is analysed

    if cif_hash not in memo:
        try:
            geometry = structure.analyse_cif_text(cif_bytes)
            memo[cif_hash] = {"geometry": dataclasses.asdict(geometry), "error": None}
        except structure.StructureError as exc:
            memo[cif_hash] = {"geometry": None, "error": str(exc)}
    entry = memo[cif_hash]
    if entry["error"]:
        return None, entry["error"]
    g = dict(entry["geometry"])
    g["layer_normal"] = None if g["layer_normal"] is None else tuple(g["layer_normal"])
    g["warnings"] = tuple(g["warnings"])
    return structure.LayerGeometry(**g), None


def _load_structure_memo(path: Path, code_version: str) -> dict:
    """Structure analyses of earlier runs, keyed by CIF content hash (same code version only)."""
    if not path.exists():
        return {}
    try:
        data = io.read_json(path)
    except (OSError, ValueError):
        return {}
    return data.get("analyses", {}) if data.get("code_version") == code_version else {}


def listed_paths(campaign: str, listing: Mapping, kind: str) -> list[str]:
    """Paths of the files of a campaign listing (``kind``: "entries" or "structures").

    ``listing`` is the JSON the workflow writes per shard (or for the whole
    campaign): rows of (file name, size, modification time) per folder.
    """
    return [os.path.join(campaign, kind, row[0]) for row in listing.get(kind, [])]


def run_shard(entry_paths: Sequence[str], campaign: str, settings: Mapping, table_path: str,
              cache_dir: str, outputs: Mapping[str, str]) -> dict[str, int]:
    """Validate, normalise and screen the records of one shard; write its tables.

    Parameters
    ----------
    entry_paths : record files of this shard.
    campaign : campaign folder (its structures/ holds the CIFs).
    settings : the physics config sections (see workflow/rules/common.smk).
    table_path : Keldysh table (.npz) built by the keldysh_table rule.
    cache_dir : folder of this shard's per-record cache.
    outputs : paths for 'entries', 'valleys', 'rejects', 'long', 'wide'.

    Returns counts of screened, rejected and reused records.
    """
    stamps = {"physics_hash": io.canonical_json_hash(dict(settings))[:16],
              "code_version": stage_code_version()}
    max_layers = settings["layers"]["max_layers"]
    structures_dir = Path(campaign) / "structures"
    checker = contract.RecordChecker(io.load_schema("entry.schema.json"))
    cache = _load_cache(Path(cache_dir), stamps)
    cached_keys = set()
    if cache:
        old_rejects = cache["rejects"]
        cache["rejects"] = old_rejects[~old_rejects["stage"].isin(CONTEXT_STAGES)] if len(old_rejects) else old_rejects
        cached_keys = set(_file_keys(cache["entries"])) | set(_file_keys(cache["rejects"]))

    reused: set[str] = set()
    new_entries, new_valleys, reject_rows = [], [], []
    readable = [p for p in entry_paths if io.skip_reason(os.path.basename(p), "entries") is None]
    siblings = case_variants([Path(p).stem for p in readable])
    memo_path = Path(cache_dir) / "structures.json"
    memo: dict = _load_structure_memo(memo_path, stamps["code_version"])
    memo_size = len(memo)
    for path in sorted(entry_paths):
        stem = Path(path).stem
        source = os.path.basename(path)
        skipped = io.skip_reason(source, "entries")
        if skipped:  # listed so the user sees it, never opened
            reject_rows += _reject_rows(stem, source, [contract.Problem("(file name)", skipped)], "skipped",
                                        "", stamps)
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
            reject_rows += _reject_rows(stem, source, [contract.Problem(
                "id", f"duplicate identifier: {source} and {others} differ only in letter case; all of them "
                      "are rejected until one is renamed or removed")], "duplicate", input_hash, stamps)
            continue
        if _file_key(stem, input_hash) in cached_keys:
            reused.add(_file_key(stem, input_hash))
            continue
        if raw.error is not None:
            reject_rows += _reject_rows(stem, source, [contract.Problem(raw.error_field, raw.error)], "read",
                                        input_hash, stamps)
            continue
        problems = checker.check(raw.data, stem=stem, structure_problem=lambda _name, why=cif_problem: why)
        if problems:
            reject_rows += _reject_rows(stem, source, problems, "contract", input_hash, stamps)
            continue
        geometry = None
        if cif_bytes is not None:
            geometry, error = _structure_geometry(cif_bytes, cif_hash, memo)
            if error:
                reject_rows += _reject_rows(stem, source, [contract.Problem(
                    "structure_file", f"{raw.data['structure_file']}: {error}")], "structure", input_hash, stamps)
                continue
        try:
            norm = ingest.normalize(raw.data, source_file=source, input_hash=input_hash, max_layers=max_layers,
                                    geometry=geometry, structure_hash=cif_hash or None,
                                    non_layered=settings["structure"]["non_layered"],
                                    reconcile_rel_tol=settings["structure"]["reconcile_rel_tol"])
        except ingest.Rejected as exc:
            reject_rows += _reject_rows(stem, source, exc.problems, "normalise", input_hash, stamps)
            continue
        new_entries.append({**norm.entry, **stamps})
        new_valleys.extend({**v, **stamps} for v in norm.valleys)

    new_entries, new_valleys, gapless = ingest.without_gapless(
        new_entries, new_valleys, max_layers=max_layers, fit_exponent=bool(settings["layers"]["fit_exponent"]))
    for entry, problems in gapless:
        reject_rows += _reject_rows(entry["entry_id"], entry["source_file"], problems, "normalise",
                                    entry["input_hash"], stamps)
    entries_new = ingest.typed_frame(new_entries, ingest.ENTRY_COLUMNS + list(stamps))
    valleys_new = ingest.typed_frame(new_valleys, ingest.valley_columns(max_layers) + list(stamps))
    table = KeldyshTable.from_arrays(io.load_arrays(table_path))
    long_new, wide_new = screen.screen_entries(entries_new, valleys_new, settings, table)
    for frame in (long_new, wide_new):
        frame["physics_hash"] = stamps["physics_hash"]
        frame["code_version"] = stamps["code_version"]

    def merged(name: str, fresh: pd.DataFrame) -> pd.DataFrame:
        parts = [fresh]
        if cache:
            old = cache[name]
            parts.append(old[_is_in(_file_keys(old), reused)])
        parts = [p for p in parts if len(p)]
        if not parts:
            return fresh
        frame = pd.concat(parts, ignore_index=True) if len(parts) > 1 else parts[0]
        order = [c for c in ("entry_id", "valley_index", "layers", "environment", "field") if c in frame.columns]
        return frame.sort_values(order, kind="stable").reset_index(drop=True)

    rejects_new = pd.DataFrame(reject_rows) if reject_rows else _empty_rejects()
    tables = {
        "entries": merged("entries", entries_new),
        "valleys": merged("valleys", valleys_new),
        "rejects": merged("rejects", rejects_new),
        "long": merged("long", long_new),
        "wide": merged("wide", wide_new),
    }
    # The generation ties the five tables together (see _load_cache); it is a
    # digest of their content keys, so identical runs write identical files.
    keys = sorted(set(tables["entries"]["input_hash"]) | set(tables["rejects"]["input_hash"]))
    generation = io.canonical_json_hash([stamps, keys])[:16]
    for name, frame in tables.items():
        io.write_parquet(_typed(frame), outputs[name], units=screen.units_for(frame.columns),
                         descriptions=screen.DESCRIPTIONS, table_metadata={**stamps, "generation": generation})
    for name in tables:
        io.copy_file(outputs[name], Path(cache_dir) / f"{name}.parquet")
    if len(memo) != memo_size:
        io.write_json({"code_version": stamps["code_version"], "analyses": memo}, memo_path)
    rejects = tables["rejects"]
    counts = {"records": len(entry_paths), "screened": int(len(tables["entries"])),
              "rejected": int(rejects["entry_id"].nunique()) if len(rejects) else 0,
              "reused": len(reused), "computed": len(new_entries),
              "reasons": [f"{r.source_file}: {r.field}: {r.reason}" for r in rejects.head(REASONS_SHOWN).itertuples()]}
    log.info("shard done: %s", counts)
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
    """Combine shard tables, add survival columns, rank, write final tables and the shortlist.

    The long, entries and valleys tables are joined by
    :func:`flakelight.assemble.run_join` (rule ``join_tables``); ``inputs["long"]``
    is read here only for the rows at the target layer count and environment.
    """
    from flakelight import ranking

    rejects = _concat(inputs["rejects"])
    wide = _concat(inputs["wide"]).sort_values("entry_id", kind="stable").reset_index(drop=True)
    probabilities = _concat(inputs["uncertainty"]) if inputs.get("uncertainty") else None
    if len(rejects):
        rejects = rejects.sort_values(["entry_id", "field"], kind="stable").reset_index(drop=True)
    meta = {"config_hash": config_hash}
    units = {**screen.UNITS, **ranking.SURVIVAL_UNITS, **ranking.RANK_UNITS}
    target_layers = int(settings["ranking"]["target_layers"])
    environment = settings["ranking"]["environment"]
    # Only the long rows at the target layer count and environment are ranked; the
    # whole long table is joined by rule join_tables (flakelight.assemble), in parallel.
    import pyarrow as pa
    import pyarrow.compute as pc

    from flakelight import assemble

    lookup = (pa.array(wide["entry_id"].astype(str).tolist(), pa.large_string()),
              pa.array(wide["lattice_angstrom"].to_numpy(dtype=float)))  # as assemble.lattice_lookup
    targets = []
    for path in inputs["long"]:
        part = io.read_arrow(path)
        chosen = pc.and_(pc.equal(part.column("layers"), target_layers),
                         pc.equal(part.column("environment"), environment))
        part = assemble.with_survival(part.filter(chosen), lookup, settings)
        targets.append(part.to_pandas())
    target = pd.concat(targets, ignore_index=True) if targets else pd.DataFrame()
    ranked = ranking.rank(target, wide, settings, probabilities)
    ranked["config_hash"] = config_hash
    io.write_parquet(rejects, outputs["rejects"], table_metadata=meta)
    io.write_csv(rejects, outputs["rejects_csv"])
    io.write_parquet(ranked, outputs["wide"], units={**screen.units_for(ranked.columns), **units},
                     descriptions=screen.DESCRIPTIONS, table_metadata=meta)
    io.write_csv(ranking.shortlist(ranked, settings), outputs["shortlist"])
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
                   config: Mapping, config_hash: str, workdir: str, output: str) -> None:
    """Run manifest: input hashes, config and its hash, code version, package versions, counts."""
    import datetime

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
        "tool": "flakelight",
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


#: Cautions shown with every output handed to experimental teams.
CAUTIONS = [
    "All numbers are model estimates from first-principles inputs, not measurements.",
    "Binding energies carry the uncertainty of the masses, dielectric constants and screening model; "
    "treat differences below about 20 % as not significant.",
    "Follow your local laboratory safety rules when preparing samples, handling chemicals and using lasers; "
    "these results do not replace a licensed safety assessment.",
]


def _record_keys(frame: pd.DataFrame) -> pd.Series:
    """Per-row cache key of a normalised record: its file key and physics hash."""
    return _file_keys(frame) + ":" + frame["physics_hash"].astype(str)


def stage_code_version() -> str:
    """Code version of the shard stage (screen and propagation): a digest of every library
    module this module can import, followed through the import graph
    (:func:`flakelight.provenance.code_version`), and of the schemas."""
    return provenance.code_version(__name__.rsplit(".", 1)[-1])


def run_propagation(entries_path: str, valleys_path: str, table_path: str, settings: Mapping,
                    cache_dir: str, output: str) -> dict[str, int]:
    """Monte Carlo propagation for one shard, re-sampling only records that changed.

    Each record's random stream depends only on the campaign seed and its
    identifier, so a cached row equals a fresh one whenever the record's
    ``input_hash`` and ``physics_hash``, the settings and the code are the same.
    """
    from flakelight import uncertainty

    entries = io.read_parquet(entries_path)
    valleys = io.read_parquet(valleys_path)
    stamps = {"settings_hash": io.canonical_json_hash(dict(settings))[:16],
              "code_version": stage_code_version()}
    cache_path = Path(cache_dir) / "uncertainty.parquet"
    keys = _record_keys(entries)
    reused = pd.DataFrame()
    if cache_path.exists() and io.parquet_metadata(cache_path) == {**io.parquet_metadata(cache_path), **stamps}:
        old = io.read_parquet(cache_path)
        reused = old[_is_in(_record_keys(old), set(keys))]
    todo = entries[~_is_in(keys, set(_record_keys(reused)) if len(reused) else set())]
    table = KeldyshTable.from_arrays(io.load_arrays(table_path))
    fresh = uncertainty.propagate_uncertainty(todo, valleys[_is_in(valleys["entry_id"], set(todo["entry_id"]))],
                                              settings, table)
    fresh["physics_hash"] = todo.set_index("entry_id").loc[fresh["entry_id"], "physics_hash"].to_numpy() \
        if len(fresh) else pd.Series(dtype="string")
    frame = pd.concat([f for f in (fresh, reused) if len(f)] or [fresh], ignore_index=True)
    frame = frame.sort_values("entry_id", kind="stable").reset_index(drop=True)
    io.write_parquet(frame, output, units=uncertainty.UNITS, descriptions=uncertainty.DESCRIPTIONS,
                     table_metadata=stamps)
    io.copy_file(output, cache_path)
    counts = {"computed": len(fresh), "reused": len(reused)}
    log.info("propagation done: %s", counts)
    return counts


def run_attribution(entries_path: str, valleys_path: str, uncertainty_path: str, table_path: str,
                    settings: Mapping, cache_dir: str, output: str) -> dict[str, int]:
    """Variance-based attribution of one shard's borderline verdicts, re-computing only changed records.

    A record is attributed when its ``p_meets_all`` (the propagation's table)
    lies in ``refinement.band``. Each record's design depends only on the
    campaign seed and its identifier, so a cached row equals a fresh one
    whenever ``input_hash``, ``physics_hash``, the settings and the code match.
    """
    from flakelight import refinement

    entries = io.read_parquet(entries_path)
    probabilities = io.read_parquet(uncertainty_path, columns=["entry_id", "p_meets_all"])
    stamps = {"settings_hash": io.canonical_json_hash(dict(settings))[:16],
              "code_version": stage_code_version()}
    ref = settings["refinement"]
    chosen = set(probabilities["entry_id"][refinement.borderline(probabilities["p_meets_all"], ref["band"])]) \
        if ref["enabled"] else set()
    entries = entries[_is_in(entries["entry_id"], chosen)] if chosen else entries.iloc[:0]
    entries = entries.assign(p_meets_all=entries["entry_id"].map(
        probabilities.set_index("entry_id")["p_meets_all"]).to_numpy(dtype=float))
    cache_path = Path(cache_dir) / "attribution.parquet"
    keys = _record_keys(entries)
    reused = pd.DataFrame()
    if len(entries) and cache_path.exists() and \
            io.parquet_metadata(cache_path) == {**io.parquet_metadata(cache_path), **stamps}:
        old = io.read_parquet(cache_path)
        reused = old[_is_in(_record_keys(old), set(keys))] if len(old) else old
    done = set(reused["entry_id"]) if len(reused) else set()
    todo = entries[~_is_in(entries["entry_id"], done)] if done else entries
    if len(todo):
        valleys = io.read_parquet(valleys_path)
        valleys = valleys[_is_in(valleys["entry_id"], set(todo["entry_id"]))]
        table = KeldyshTable.from_arrays(io.load_arrays(table_path))
        fresh = refinement.attribute(todo, valleys, settings, table)
    else:
        fresh = refinement.empty_frame()
    frame = pd.concat([f for f in (fresh, reused) if len(f)] or [fresh], ignore_index=True)
    frame = frame.sort_values(["entry_id", "output", "input_group"], kind="stable").reset_index(drop=True)
    io.write_parquet(frame, output, units=refinement.UNITS, descriptions=refinement.DESCRIPTIONS,
                     table_metadata=stamps)
    io.copy_file(output, cache_path)
    counts = {"borderline": len(entries), "computed": int(todo["entry_id"].nunique()) if len(todo) else 0,
              "reused": len(done)}
    log.info("attribution done: %s", counts)
    return counts


def run_refinement_list(attribution_paths: Sequence[str], settings: Mapping, outputs: Mapping[str, str],
                        config_hash: str) -> int:
    """Join the shards' attribution rows; write them, the ranked refinement list and its CSV."""
    from flakelight import refinement

    frame = _concat(attribution_paths)
    if not len(frame):
        frame = refinement.empty_frame()
    frame = frame.sort_values(["entry_id", "output", "input_group"], kind="stable").reset_index(drop=True)
    ref = settings["refinement"]
    ranked = refinement.refinement_list(frame, effect=ref["effect"], per_entry=int(ref["per_compound"]))
    meta = {"config_hash": config_hash}
    io.write_parquet(frame, outputs["attribution"], units=refinement.UNITS, descriptions=refinement.DESCRIPTIONS,
                     table_metadata=meta)
    io.write_parquet(ranked, outputs["refinement"], units=refinement.UNITS, descriptions=refinement.DESCRIPTIONS,
                     table_metadata=meta)
    io.write_csv(refinement.display_frame(ranked), outputs["csv"])
    log.info("refinement list: %d rows from %d compounds", len(ranked),
             ranked["entry_id"].nunique() if len(ranked) else 0)
    return len(ranked)
