# Helper functions, config validation and wildcard constraints. No rules here.
import ast
import functools
import os
import shlex
import sys
from pathlib import Path

from snakemake.utils import validate

sys.path.insert(0, str(Path(workflow.basedir) / "workflow"))
from lamellume.configcheck import (  # noqa: E402
    cross_problems, placeholder_message, placeholder_resources, text_given_for_numbers)
from lamellume.provenance import adapter_files  # noqa: E402
from lamellume import io  # noqa: E402
from lamellume.io import campaign_listing as campaign_listing_rows, canonical_json_hash, snapshot_json  # noqa: E402
from lamellume.sharding import shard_name, shard_of_file  # noqa: E402
from lamellume.io import calculation_listing as calculation_listing_rows  # noqa: E402


# Before the schema: the nested --config pitfall gets a message naming the remedy.
if text_given_for_numbers(config, io.load_schema("config.schema.json")):
    sys.exit("lamellume: the config has problems:\n  "
             + "\n  ".join(text_given_for_numbers(config, io.load_schema("config.schema.json"))))
validate(config, schema="../schemas/config.schema.json")
if cross_problems(config):  # before any job: one line per problem, each with its key path
    sys.exit("lamellume: the config has problems:\n  " + "\n  ".join(cross_problems(config)))



def cluster_placeholders():
    """Resources of the profile in use that still hold the shipped placeholder (EDIT_ME_...)."""
    rs = workflow.resource_settings
    defaults = getattr(rs.default_resources, "args", None) or []
    overrides = {rule: {name: getattr(r, "raw", r) for name, r in res.items()}
                 for rule, res in (rs.overwrite_resources or {}).items()}
    return placeholder_resources(defaults, overrides)


# Before planning, so a dry run stops too and nothing is ever submitted with a placeholder.
if cluster_placeholders():
    sys.exit(placeholder_message(cluster_placeholders()))


wildcard_constraints:
    shard=r"\d{3}",


ADAPTERS = Path(workflow.basedir) / "workflow" / "scripts"


def job_python():
    """Interpreter of the adapter jobs: `python` of the job's software environment under
    --sdm conda, apptainer or env-modules (as Snakemake's script: directive does), else
    the interpreter running Snakemake."""
    methods = getattr(workflow.deployment_settings, "deployment_method", None) or set()
    return "python" if methods else sys.executable


def adapter(name, inputs=(), outputs=(), wildcards=()):
    """Shell command of a rule: workflow/scripts/<name>.py with its named inputs, outputs,
    wildcards and log (parsed by workflow/scripts/adapter_args.py)."""
    words = [shlex.quote(job_python()), shlex.quote(str(ADAPTERS / f"{name}.py")), "--log {log:q}",
             "--threads {threads}"]
    words += [f"--input {k} {{input.{k}:q}}" for k in inputs]
    words += [f"--output {k} {{output.{k}:q}}" for k in outputs]
    words += [f"--wildcard {w} {{wildcards.{w}:q}}" for w in wildcards]
    return " ".join(words)


def shipped_data(name):
    """A data file shipped with the workflow (workflow/data/<name>), e.g. the Keldysh table."""
    return str(Path(workflow.basedir) / "workflow" / "data" / name)


def campaign_dir():
    """Campaign folder (absolute when given relative to the working directory)."""
    return Path(config["campaign"])


#: Folder of the content-addressed job settings and campaign listings (see `snapshot`).
SNAPSHOTS = "results/cache/inputs"


@functools.cache
def campaign_listing(kind):
    """Files of campaign folder `kind` ('entries' or 'structures') as (name, size, mtime_ns).

    Listed once per Snakemake run (one scandir pass). Record and structure files are
    not declared as inputs one by one: at 10,000 records that alone cost Snakemake over
    a second. Each shard job takes a listing of its records (and of all structure files)
    as its input instead, written by `snapshot` under a name that carries a digest of the
    listing: a record added, removed, resized or rewritten changes the name and re-runs
    the shard, where the per-record cache recomputes only records whose content changed.
    """
    return tuple(campaign_listing_rows(campaign_dir(), kind))


def campaign_problem():
    """Why the campaign cannot be screened (missing folder, no record files), or None."""
    folder = campaign_dir()
    where = f"'{folder}' (config key campaign, working directory {Path.cwd()})"
    if not folder.is_dir():
        return f"the campaign folder {where} does not exist"
    if has_calculations() or campaign_listing("entries"):
        return None
    if not (folder / "entries").is_dir():
        return f"the campaign folder {where} has no entries/ folder for the record files (nor calculations/)"
    return f"the campaign folder {where} holds no record files (entries/*.json) and no calculations/"


def screen_asked():
    """True when this run's plan holds the screen's manifest (rule all or a target that needs
    it), so the summary's counts belong to this run's request; False for, e.g., a run of
    validate_campaign alone, whose summary must not repeat an earlier screen's counts."""
    dag = getattr(workflow, "dag", None)
    if dag is None:
        return True
    return any(job.rule.name == "write_manifest" for job in dag.jobs)


def run_summary():
    """Console lines that end a successful run: records read, screened, rejected (with the
    rejects CSV and the first reasons), candidates and the page (from the run's outputs)."""
    counts_path, manifest_path = Path("results/cache/screen_counts.json"), Path("results/manifest.json")
    if not screen_asked():
        return "lamellume: run finished (no screen was asked for: rule all was not a target)"
    if not counts_path.exists() or not manifest_path.exists():
        return "lamellume: run finished (no complete screen yet: rule all was not asked for)"
    counts, manifest = io.read_json(counts_path), io.read_json(manifest_path)
    candidates = manifest["counts"]["candidates"]
    lines = [f"lamellume: {counts['records']} record files read, {counts['screened']} screened, "
             f"{counts['rejected']} rejected, {candidates} candidate{'' if candidates == 1 else 's'}."]
    if counts["rejected"]:
        lines.append("  rejects: results/tables/rejects.csv; first reasons:")
        lines += [f"    {reason}" for reason in counts["reasons"]]
    lines.append("  summary page: results/summary.html; shortlist: results/shortlist.csv "
                 "(its settings: results/shortlist_settings.csv)")
    lines.append(f"  results/ is {Path('results').resolve()} (the working directory's)")
    return "\n".join(lines)


def summary_when_nothing_to_do():
    """Print :func:`run_summary` at the end of a real run that found everything up to date.

    Snakemake returns before its ``onsuccess`` hook when there is nothing to do, so the
    run would end with its "Nothing to be done" line alone. A logging handler notes that
    line and an ``atexit`` hook prints the summary (main process only, never in a dry
    run): every run ends with the summary. DEVELOPERS.md, "State outside the DAG, and why".
    """
    import atexit
    import logging

    seen, workdir = [], os.getcwd()  # the working directory (Snakemake leaves it before the exit)

    class NothingToDo(logging.Handler):
        def emit(self, record):
            if str(record.msg).startswith("Nothing to be done"):
                seen.append(True)

    def at_exit():
        if seen and not workflow.dryrun:
            back = os.getcwd()
            os.chdir(workdir)
            try:
                print(run_summary(), flush=True)
            finally:
                os.chdir(back)

    if workflow.is_main_process:
        logging.getLogger("snakemake").addHandler(NothingToDo())
        atexit.register(at_exit)


def no_collection_at_exit():
    """Spare the Snakemake process the garbage collector's passes over its objects at exit.

    Python ends a process by clearing its modules and collecting the garbage among every
    object still alive: for Snakemake's process (Snakemake, its plugins and this workflow's
    helpers) about a quarter of a second of every run, no-op and dry runs included, once
    the run itself is over. An ``atexit`` hook calls ``gc.freeze()``, after which the
    collector never examines those objects again; the exit status, the other ``atexit``
    hooks (the log's flush among them) and the streams' flush are as before. DEVELOPERS.md,
    "State outside the DAG, and why".
    """
    import atexit
    import gc

    atexit.register(gc.freeze)


def shard_names():
    """Names of all shards, e.g. ['000', '001', ...]."""
    return [shard_name(i) for i in range(config["sharding"]["shards"])]


@functools.cache
def _shard_rows():
    """Listing rows of the records of every shard, by shard index."""
    n = config["sharding"]["shards"]
    rows = {i: [] for i in range(n)}
    for row in campaign_listing("entries"):
        rows[shard_of_file(row[0], n)].append(row)
    return rows


#: Snapshots this Snakemake process uses (kept by `remove_old_snapshots`).
SNAPSHOTS_USED = set()


def snapshot(prefix, content):
    """Path of the content-addressed JSON snapshot `prefix` (written when new).

    Rules take their settings and listings as such files, never as `params`: a changed
    value re-runs the rule under any re-run trigger, and Snakemake, holding no params and
    running no `script:` jobs, never loads pandas (a quarter of a second on every run).
    Writing one never removes another: dry runs call this too (see `remove_old_snapshots`).
    """
    path = snapshot_json(SNAPSHOTS, prefix, content)
    SNAPSHOTS_USED.add(path)
    return path


def remove_old_snapshots():
    """Remove the snapshots this run does not use (called by `onstart`, which Snakemake runs
    only in a real run, holding the lock, after planning: a dry run never removes a file
    that a running run reads)."""
    if Path(SNAPSHOTS).is_dir():
        io.remove_snapshots_except(SNAPSHOTS, SNAPSHOTS_USED)


def shard_records(wildcards):
    """Listing of one shard's record files plus every structure file."""
    return snapshot(f"records-{wildcards.shard}",
                    {"entries": _shard_rows()[int(wildcards.shard)], "structures": campaign_listing("structures")})


def campaign_records(wildcards):
    """Listing of every record and structure file of the campaign (for the manifest)."""
    return snapshot("records-all", {"entries": campaign_listing("entries"), "structures": campaign_listing("structures")})


def code_files(adapter_name):
    """Sources behind a job, declared as inputs so that editing any of them re-runs it: the
    adapter, the helpers it imports, every library module reachable through imports from
    it, the data files those modules declare (``DATA_FILES``: the page's templates) and the
    schemas (derived from the code by lamellume.provenance, never listed by hand)."""
    return adapter_files(ADAPTERS / f"{adapter_name}.py")


def library_files():
    """Every library module and page template: the manifest's ``code_version`` digests them
    all (lamellume.io.library_digest), so the manifest job depends on them all."""
    return [str(p) for p in io.library_paths()]


def physics_settings():
    """The config sections the shard computation depends on (a change re-runs the shards)."""
    keys = ("layers", "structure", "environments", "monolayer", "excitons", "emission_bands")
    return {k: config[k] for k in keys}


def ranking_settings():
    """The config sections the ranking depends on (temperature and criteria)."""
    return {k: config[k] for k in ("survival", "ranking", "environments")}


def uncertainty_settings():
    """Config sections the uncertainty propagation depends on."""
    return {k: config[k] for k in ("uncertainty", "survival", "ranking", "layers", "monolayer", "excitons",
                                   "environments")}


def shard_outputs(name):
    """One output table of every shard."""
    return expand("results/shards/{shard}/{name}.parquet", shard=shard_names(), name=name)


def final_outputs():
    """Everything `rule all` asks for."""
    return [
        "results/tables/screen_long.parquet",
        "results/tables/screen_wide.parquet",
        "results/tables/entries.parquet",
        "results/tables/rejects.parquet",
        "results/shortlist.csv",
        "results/shortlist_settings.csv",
        "results/tables/refinement.parquet",
        "results/refinement.csv",
        "results/manifest.json",
        "results/summary.html",
    ]


def config_hash():
    """Content hash of the whole (validated) config, stamped on every result row."""
    return canonical_json_hash(config)[:16]


def screen_settings(wildcards):
    """Settings of the screen_shard jobs: physics and uncertainty sections, campaign, sharding."""
    return snapshot("screen", {"physics": physics_settings(), "uncertainty": uncertainty_settings(),
                               "campaign": str(campaign_dir()), "shards": config["sharding"]["shards"],
                               "cache_root": "results/cache/shards"})


def attribution_settings(wildcards):
    """Settings of the attribute_shard jobs: the propagation's sections plus refinement."""
    return snapshot("attribution", {"settings": {**uncertainty_settings(), "refinement": config["refinement"]},
                                    "cache_root": "results/cache/shards"})


def refinement_list_settings(wildcards):
    """Settings of the refinement_list job."""
    return snapshot("refinement", {"settings": {"refinement": config["refinement"]}, "config_hash": config_hash()})


def rank_settings(wildcards):
    """Settings of the rank_candidates job."""
    return snapshot("rank", {"settings": ranking_settings(), "config_hash": config_hash()})


def validate_settings(wildcards):
    """Settings of the validate_campaign job: the campaign and the sections its checks read."""
    return snapshot("validate", {"campaign": str(campaign_dir()), "physics": {k: config[k] for k in ("layers", "structure")}})


def join_settings(wildcards):
    """Settings of the join_tables job."""
    return snapshot("join", {"config_hash": config_hash()})


def manifest_settings(wildcards):
    """Settings of the write_manifest job: the whole config, its hash, the checkout to describe."""
    return snapshot("manifest", {"config": config, "config_hash": config_hash(),
                                 "workdir": str(Path(workflow.basedir)), "campaign": str(campaign_dir())})


def summary_settings(wildcards):
    """Settings of the write_summary job: the whole config and the campaign's own history folder
    (results/history/<campaign folder name>: campaigns never mix)."""
    return snapshot("summary", {"settings": config,
                                "history": str(io.campaign_history_dir("results/history", campaign_dir()))})


# ---------------------------------------------------------------- import of calculations


@functools.cache
def calculation_files():
    """Files of the campaign's calculations/<id>/ folders as (id/name, size, mtime_ns); empty without them."""
    return tuple(calculation_listing_rows(campaign_dir()))


def has_calculations():
    """True when the campaign holds compounds given as calculations (the import stage runs)."""
    return bool(calculation_files())


@functools.cache
def _calculation_shard_rows():
    """Listing rows of every shard's compound folders (a compound goes where its record would)."""
    n = config["sharding"]["shards"]
    rows = {i: [] for i in range(n)}
    for row in calculation_files():
        rows[shard_of_file(Path(row[0]).parts[0] + ".json", n)].append(row)
    return rows


def shard_calculations(wildcards):
    """Listing of one shard's calculation files (a new name whenever one of them changes)."""
    return snapshot(f"calculations-{wildcards.shard}", {"calculations": _calculation_shard_rows()[int(wildcards.shard)]})


def import_settings(wildcards):
    """Settings of the import_calculations jobs."""
    return snapshot("import", {"campaign": str(campaign_dir()), "cache_root": "results/cache/imports"})


def imported_records(wildcards):
    """The records the import wrote for a shard (none without calculations)."""
    return [f"results/imported/{wildcards.shard}/entries"] if has_calculations() else []


def import_outputs(name):
    """One output table of every import job (none without calculations)."""
    return expand("results/imported/{shard}/{name}.parquet", shard=shard_names(), name=name) if has_calculations() else []


#: Names of the optional inputs of screen_shard (its adapter gets --input imported only with calculations).
SCREEN_IMPORT_INPUTS = ("imported",) if has_calculations() else ()


# Start-up checks: stop before any job (and before results/ is touched) with a one-line reason.
if campaign_problem():
    sys.exit(f"lamellume: {campaign_problem()}; nothing was run and results/ is unchanged")
