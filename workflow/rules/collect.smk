# Stage 2: combine shards, apply temperature and ranking criteria, write the
# final tables, the shortlist and the run manifest. Cheap: run locally.


localrules:
    rank_candidates,
    join_tables,
    write_manifest,


rule rank_candidates:
    input:
        rejects=shard_outputs("rejects") + import_outputs("rejects"),
        long=shard_outputs("exciton_long"),
        wide=shard_outputs("exciton_wide"),
        uncertainty=shard_outputs("uncertainty"),
        settings=rank_settings,
        code=code_files("rank_candidates", "survival", "ranking", "pipeline", "assemble"),
    output:
        rejects="results/tables/rejects.parquet",
        rejects_csv="results/tables/rejects.csv",
        wide="results/tables/screen_wide.parquet",
        shortlist="results/shortlist.csv",
    log:
        "results/logs/rank_candidates/rank_candidates.log",
    conda:
        "../../envs/flakelight.yaml"
    shell:
        adapter(
            "rank_candidates",
            inputs=("rejects", "long", "wide", "uncertainty", "settings"),
            outputs=("rejects", "rejects_csv", "wide", "shortlist"),
        )


# The long table (about 20 rows per compound), entries and valleys are joined beside the
# ranking, by a job that imports pyarrow and numpy only (flakelight.assemble).
rule join_tables:
    input:
        long=shard_outputs("exciton_long"),
        wide=shard_outputs("exciton_wide"),
        entries=shard_outputs("entries"),
        valleys=shard_outputs("valleys"),
        settings=join_settings,
        code=code_files("join_tables", "survival", "assemble"),
    output:
        long="results/tables/screen_long.parquet",
        entries="results/tables/entries.parquet",
        valleys="results/tables/valleys.parquet",
    log:
        "results/logs/join_tables/join_tables.log",
    conda:
        "../../envs/flakelight.yaml"
    shell:
        adapter(
            "join_tables",
            inputs=("long", "wide", "entries", "valleys", "settings"),
            outputs=("long", "entries", "valleys"),
        )


rule write_manifest:
    input:
        tables=rules.rank_candidates.output.wide,
        records=campaign_records,
        settings=manifest_settings,
        code=code_files("write_manifest", "pipeline"),
    output:
        manifest="results/manifest.json",
    log:
        "results/logs/write_manifest/write_manifest.log",
    conda:
        "../../envs/flakelight.yaml"
    shell:
        adapter(
            "write_manifest",
            inputs=("tables", "records", "settings"),
            outputs=("manifest",),
        )
