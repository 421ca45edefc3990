# Stage 2: combine shards, apply temperature and ranking criteria, write the
# final tables, the shortlist and the run manifest. Cheap: run locally.


localrules:
    rank_candidates,
    join_long,
    write_manifest,


rule rank_candidates:
    input:
        entries=shard_outputs("entries"),
        valleys=shard_outputs("valleys"),
        rejects=shard_outputs("rejects"),
        long=shard_outputs("exciton_long"),
        wide=shard_outputs("exciton_wide"),
        uncertainty=shard_outputs("uncertainty"),
        code=library_files("survival", "ranking", "pipeline", "assemble"),
    output:
        entries="results/tables/entries.parquet",
        valleys="results/tables/valleys.parquet",
        rejects="results/tables/rejects.parquet",
        rejects_csv="results/tables/rejects.csv",
        wide="results/tables/screen_wide.parquet",
        shortlist="results/shortlist.csv",
    params:
        settings=ranking_settings(),
        config_hash=config_hash(),
    log:
        "results/logs/rank_candidates/rank_candidates.log",
    conda:
        "../../envs/flakelight.yaml"
    script:
        "../scripts/rank_candidates.py"


# The long table (about 20 rows per compound) is joined beside the ranking, by a job
# that imports pyarrow and numpy only (flakelight.assemble).
rule join_long:
    input:
        long=shard_outputs("exciton_long"),
        wide=shard_outputs("exciton_wide"),
        code=library_files("survival", "assemble"),
    output:
        "results/tables/screen_long.parquet",
    params:
        settings={"survival": config["survival"]},
        config_hash=config_hash(),
    log:
        "results/logs/join_long/join_long.log",
    conda:
        "../../envs/flakelight.yaml"
    script:
        "../scripts/join_long.py"


rule write_manifest:
    input:
        tables=rules.rank_candidates.output.wide,
    output:
        "results/manifest.json",
    params:
        config=config,
        config_hash=config_hash(),
        workdir=str(Path(workflow.basedir)),
        campaign=str(campaign_dir()),
        inputs_stamp=campaign_stamp(),
    log:
        "results/logs/write_manifest/write_manifest.log",
    conda:
        "../../envs/flakelight.yaml"
    script:
        "../scripts/write_manifest.py"
