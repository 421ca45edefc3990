# Helper functions, config validation and wildcard constraints. No rules here.
import sys
from pathlib import Path

from snakemake.utils import validate

sys.path.insert(0, str(Path(workflow.basedir) / "workflow"))
from flakelight import PROPAGATION_MODULES, SHARD_MODULES  # noqa: E402
from flakelight.sharding import shard_name, shard_of  # noqa: E402


validate(config, schema="../schemas/config.schema.json")


wildcard_constraints:
    shard=r"\d{3}",


LIBRARY = Path(workflow.basedir) / "workflow" / "flakelight"


def campaign_dir():
    """Campaign folder (absolute when given relative to the working directory)."""
    return Path(config["campaign"])


def entry_files():
    """All record files of the campaign, sorted; hidden files are skipped."""
    folder = campaign_dir() / "entries"
    if not folder.is_dir():
        return []
    return sorted(str(p) for p in folder.glob("*.json") if not p.name.startswith("."))


def structure_files():
    """All CIF files of the campaign, sorted."""
    folder = campaign_dir() / "structures"
    if not folder.is_dir():
        return []
    return sorted(str(p) for p in folder.glob("*.cif") if not p.name.startswith("."))


def shard_names():
    """Names of all shards, e.g. ['000', '001', ...]."""
    return [shard_name(i) for i in range(config["sharding"]["shards"])]


def shard_entries(wildcards):
    """Record files assigned to one shard by the stable hash of their stem."""
    n = config["sharding"]["shards"]
    index = int(wildcards.shard)
    return [f for f in entry_files() if shard_of(Path(f).stem, n) == index]


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
