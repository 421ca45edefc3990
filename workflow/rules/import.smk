# Stage 0b: first-principles calculations to records. Only when the campaign has a
# calculations/ folder: one job per shard turns each compound folder
# (calculations/<id>/calcset.json and the files it names) into a record of the input
# contract, which that shard's screen_shard job reads beside the hand-written records.
# A per-compound cache (keyed by the hashes of the compound's files) re-imports only
# compounds whose files changed.


rule import_calculations:
    input:
        # the shard's calculation files (names, sizes, times): a new name whenever one changes
        listing=shard_calculations,
        settings=import_settings,
        code=code_files("import_calculations"),
    output:
        records=directory("results/imported/{shard}/entries"),
        rejects="results/imported/{shard}/rejects.parquet",
        report="results/imported/{shard}/report.parquet",
    log:
        "results/logs/import_calculations/{shard}.log",
    # No benchmark: directive (DEVELOPERS.md, "State outside the DAG, and why"): the job logs its
    # own CPU seconds and peak memory as it ends (io.end_job).
    threads: 1
    conda:
        "../../envs/lamellume.yaml"
    shell:
        adapter(
            "import_calculations",
            inputs=("listing", "settings"),
            outputs=("records", "rejects", "report"),
            wildcards=("shard",),
        )
