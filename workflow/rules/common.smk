# Helper functions, config validation and wildcard constraints. No rules here.
import functools
import sys
from pathlib import Path

from snakemake.utils import validate

sys.path.insert(0, str(Path(workflow.basedir) / "workflow"))
from flakelight import PROPAGATION_MODULES, SHARD_MODULES  # noqa: E402
from flakelight.io import campaign_listing as campaign_listing_rows, listing_stamp  # noqa: E402
from flakelight.sharding import shard_name, shard_of_file  # noqa: E402


validate(config, schema="../schemas/config.schema.json")


wildcard_constraints:
    shard=r"\d{3}",


LIBRARY = Path(workflow.basedir) / "workflow" / "flakelight"


def campaign_dir():
    """Campaign folder (absolute when given relative to the working directory)."""
    return Path(config["campaign"])


@functools.cache
def campaign_listing(kind):
    """Files of campaign folder `kind` ('entries' or 'structures') as (name, size, mtime_ns).

    Listed once per Snakemake run (one scandir pass). Record and structure files are
    not declared as inputs: at 10,000 records the per-file DAG alone took over a
    second. Their listing digests (`shard_stamp`, `campaign_stamp`) are rule params
    instead, so Snakemake's `params` re-run trigger catches every added, removed or
    rewritten file, and inside a shard the per-record cache recomputes only records
    whose content hash changed.
    """
    return tuple(campaign_listing_rows(campaign_dir(), kind))


def shard_names():
    """Names of all shards, e.g. ['000', '001', ...]."""
    return [shard_name(i) for i in range(config["sharding"]["shards"])]


@functools.cache
def _shard_rows():
    """Listing rows of the records of every shard, by shard index."""
    n = config["sharding"]["shards"]
    rows = {i: [] for i in range(n)}
    for row in campaign_listing("entries"):
        rows[shard_of_file(row[0], n)].append(("entries",) + row)
    return rows


def shard_stamp(wildcards):
    """Digest of one shard's record files plus every structure file (names, sizes, times)."""
    structures = [("structures",) + row for row in campaign_listing("structures")]
    return listing_stamp(_shard_rows()[int(wildcards.shard)] + structures)


def campaign_stamp():
    """Digest of every record and structure file of the campaign."""
    return listing_stamp([(kind,) + row for kind in ("entries", "structures") for row in campaign_listing(kind)])


def library_files(*modules):
    """Library source files a rule imports, declared as inputs so code changes re-run it."""
    names = dict.fromkeys(("__init__", "units", "io") + modules)
    return [str(LIBRARY / f"{m}.py") for m in names]


def physics_settings():
    """The config sections the shard computation depends on (params: changes re-run shards)."""
    keys = ("layers", "structure", "environments", "monolayer", "emission_bands")
    return {k: config[k] for k in keys}


def ranking_settings():
    """The config sections the ranking depends on (temperature and criteria)."""
    return {k: config[k] for k in ("survival", "ranking", "environments")}


def uncertainty_settings():
    """Config sections the uncertainty propagation depends on."""
    return {k: config[k] for k in ("uncertainty", "survival", "ranking", "layers", "monolayer", "environments")}


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
        "results/manifest.json",
        "results/summary.html",
    ]


def config_hash():
    """Content hash of the whole (validated) config, stamped on every result row."""
    from flakelight.io import canonical_json_hash

    return canonical_json_hash(config)[:16]


def campaign_param(wildcards):
    """Campaign folder as a rule parameter (the adapter finds structures/ in it)."""
    return str(campaign_dir())
