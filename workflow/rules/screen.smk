# Stage 1: per-shard ingestion, validation and exciton physics.
# One job per shard; inside it a per-record cache keyed by content hash,
# physics settings and code version recomputes only what changed.


rule screen_shard:
    input:
        entries=shard_entries,
        structures=structure_files(),
        table=rules.keldysh_table.output[0],
        code=library_files(*SHARD_MODULES),
    output:
        entries="results/shards/{shard}/entries.parquet",
        valleys="results/shards/{shard}/valleys.parquet",
        rejects="results/shards/{shard}/rejects.parquet",
        long="results/shards/{shard}/exciton_long.parquet",
        wide="results/shards/{shard}/exciton_wide.parquet",
    params:
        settings=physics_settings(),
        campaign=campaign_param,
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


rule propagate_shard:
    input:
        entries="results/shards/{shard}/entries.parquet",
        valleys="results/shards/{shard}/valleys.parquet",
        table=rules.keldysh_table.output[0],
        code=library_files(*PROPAGATION_MODULES),
    output:
        "results/shards/{shard}/uncertainty.parquet",
    params:
        settings=uncertainty_settings(),
        cache="results/cache/shards/{shard}",
    log:
        "results/logs/propagate_shard/{shard}.log",
    benchmark:
        "results/benchmarks/propagate_shard/{shard}.tsv"
    threads: 1
    conda:
        "../../envs/flakelight.yaml"
    script:
        "../scripts/propagate_shard.py"
