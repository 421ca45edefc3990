# Stage 1: per-shard ingestion, validation, exciton physics and uncertainty propagation.
# One job per shard; inside it two per-record caches (screen rows keyed by content hash,
# physics settings and code version; uncertainty rows also by the uncertainty, survival
# and ranking settings) recompute only what changed. A change of temperature or of a
# ranking criterion re-runs the job, but every screen row then comes from the cache and
# only the Monte Carlo propagation is redone.


rule screen_shard:
    input:
        table=rules.keldysh_table.output[0],
        # the shard's record files and every structure file (names, sizes, times):
        # a new name whenever one of them changes (common.smk: snapshot)
        records=shard_records,
        settings=screen_settings,
        # records written by import_calculations for this shard (none without calculations/)
        imported=imported_records,
        code=code_files("screen_shard"),
    output:
        entries="results/shards/{shard}/entries.parquet",
        valleys="results/shards/{shard}/valleys.parquet",
        rejects="results/shards/{shard}/rejects.parquet",
        long="results/shards/{shard}/exciton_long.parquet",
        wide="results/shards/{shard}/exciton_wide.parquet",
        uncertainty="results/shards/{shard}/uncertainty.parquet",
        counts="results/shards/{shard}/counts.json",
    log:
        "results/logs/screen_shard/{shard}.log",
    # No benchmark: directive (DEVELOPERS.md, "State outside the DAG, and why"): the job logs its
    # own CPU seconds and peak memory as it ends (io.end_job).
    threads: 1
    conda:
        "../../envs/lamellume.yaml"
    shell:
        adapter(
            "screen_shard",
            inputs=("table", "records", "settings") + SCREEN_IMPORT_INPUTS,
            outputs=("entries", "valleys", "rejects", "long", "wide", "uncertainty", "counts"),
            wildcards=("shard",),
        )

