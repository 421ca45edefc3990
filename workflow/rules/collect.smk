# Stage 2: combine shards, apply temperature and ranking criteria, write the
# final tables, the shortlist and the run manifest. Cheap: run locally.


localrules:
    rank_candidates,
    write_manifest,


rule rank_candidates:
    input:
        entries=shard_outputs("entries"),
        valleys=shard_outputs("valleys"),
        rejects=shard_outputs("rejects"),
        long=shard_outputs("exciton_long"),
        wide=shard_outputs("exciton_wide"),
        uncertainty=shard_outputs("uncertainty"),
        code=library_files("survival", "ranking", "pipeline"),
    output:
        entries="results/tables/entries.parquet",
        valleys="results/tables/valleys.parquet",
        rejects="results/tables/rejects.parquet",
        rejects_csv="results/tables/rejects.csv",
        long="results/tables/screen_long.parquet",
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
