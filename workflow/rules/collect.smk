# Stage 2: combine shards, apply temperature and ranking criteria, write the
# final tables, the shortlist and the run manifest. Cheap: run locally.


localrules:
    check_screen,
    rank_candidates,
    join_tables,
    write_manifest,


# A run that screens nothing stops here, before any job that writes results/tables, the
# shortlist, the page or the history has started (Snakemake removes a job's old outputs
# only when the job starts).
rule check_screen:
    input:
        counts=expand("results/shards/{shard}/counts.json", shard=shard_names()),
        code=code_files("check_screen"),
    output:
        counts="results/cache/screen_counts.json",
    log:
        "results/logs/check_screen/check_screen.log",
    conda:
        "../../envs/lamellume.yaml"
    shell:
        adapter(
            "check_screen",
            inputs=("counts",),
            outputs=("counts",),
        )


rule rank_candidates:
    input:
        checked=rules.check_screen.output.counts,
        rejects=shard_outputs("rejects") + import_outputs("rejects"),
        long=shard_outputs("exciton_long"),
        wide=shard_outputs("exciton_wide"),
        uncertainty=shard_outputs("uncertainty"),
        settings=rank_settings,
        code=code_files("rank_candidates"),
    output:
        rejects="results/tables/rejects.parquet",
        rejects_csv="results/tables/rejects.csv",
        wide="results/tables/screen_wide.parquet",
        shortlist="results/shortlist.csv",
    log:
        "results/logs/rank_candidates/rank_candidates.log",
    conda:
        "../../envs/lamellume.yaml"
    shell:
        adapter(
            "rank_candidates",
            inputs=("rejects", "long", "wide", "uncertainty", "settings"),
            outputs=("rejects", "rejects_csv", "wide", "shortlist"),
        )


# The long table (about 20 rows per compound), entries and valleys are joined beside the
# ranking, by a job that imports pyarrow and numpy only (lamellume.assemble).
rule join_tables:
    input:
        checked=rules.check_screen.output.counts,
        long=shard_outputs("exciton_long"),
        entries=shard_outputs("entries"),
        valleys=shard_outputs("valleys"),
        settings=join_settings,
        code=code_files("join_tables"),
    output:
        long="results/tables/screen_long.parquet",
        entries="results/tables/entries.parquet",
        valleys="results/tables/valleys.parquet",
    log:
        "results/logs/join_tables/join_tables.log",
    conda:
        "../../envs/lamellume.yaml"
    shell:
        adapter(
            "join_tables",
            inputs=("long", "entries", "valleys", "settings"),
            outputs=("long", "entries", "valleys"),
        )


rule write_manifest:
    input:
        tables=rules.rank_candidates.output.wide,
        records=campaign_records,
        settings=manifest_settings,
        code=sorted(set(code_files("write_manifest")) | set(library_files())),
    output:
        manifest="results/manifest.json",
        shortlist_settings="results/shortlist_settings.csv",
    log:
        "results/logs/write_manifest/write_manifest.log",
    conda:
        "../../envs/lamellume.yaml"
    shell:
        adapter(
            "write_manifest",
            inputs=("tables", "records", "settings"),
            outputs=("manifest", "shortlist_settings"),
        )
