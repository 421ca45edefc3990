# Stage 1: per-shard ingestion, validation, exciton physics and uncertainty propagation.
# One job per shard; inside it two per-record caches (screen rows keyed by content hash,
# physics settings and code version; uncertainty rows also by the uncertainty, survival
# and ranking settings) recompute only what changed. A change of temperature or of a
# ranking criterion re-runs the job, but every screen row then comes from the cache and
# only the Monte Carlo propagation is redone.


rule screen_shard:
    input:
        table=rules.keldysh_table.output[0],
        code=library_files(*SHARD_MODULES, *PROPAGATION_MODULES),
    output:
        entries="results/shards/{shard}/entries.parquet",
        valleys="results/shards/{shard}/valleys.parquet",
        rejects="results/shards/{shard}/rejects.parquet",
        long="results/shards/{shard}/exciton_long.parquet",
        wide="results/shards/{shard}/exciton_wide.parquet",
        uncertainty="results/shards/{shard}/uncertainty.parquet",
    params:
        settings=physics_settings(),
        uncertainty=uncertainty_settings(),
        campaign=campaign_param,
        shards=config["sharding"]["shards"],
        # The shard's record files and all structure files are found by listing the
        # campaign; their digest re-runs the job when any of them changes (common.smk).
        inputs_stamp=shard_stamp,
        cache="results/cache/shards/{shard}",
    log:
        "results/logs/screen_shard/{shard}.log",
    benchmark:
        "results/benchmarks/screen_shard/{shard}.tsv"
    threads: 1
    conda:
        "../../envs/flakelight.yaml"
    script:
        "../scripts/screen_shard.py"

