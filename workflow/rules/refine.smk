# Stage 2b: what to recompute next. For every record whose chance of meeting every
# criterion (or of making the shortlist) lies in refinement.band, attribute the verdict's
# uncertainty to the input groups (Saltelli 2010 / Jansen 1999 Sobol indices), per shard
# with a per-record cache like the propagation's; then rank (compound, verdict, input,
# expected effect) for the campaign. Shortlist membership is measured against the ranked
# table's cut keys, so every attribute_shard job follows rank_candidates.


localrules:
    refinement_list,


rule attribute_shard:
    input:
        table=rules.keldysh_table.output[0],
        entries=rules.screen_shard.output.entries,
        valleys=rules.screen_shard.output.valleys,
        uncertainty=rules.screen_shard.output.uncertainty,
        ranked=rules.rank_candidates.output.wide,
        settings=attribution_settings,
        code=code_files("attribute_shard"),
    output:
        attribution="results/shards/{shard}/attribution.parquet",
    log:
        "results/logs/attribute_shard/{shard}.log",
    # No benchmark: directive (DEVELOPERS.md, "State outside the DAG, and why"): the job logs its
    # own CPU seconds and peak memory as it ends (io.end_job).
    threads: 1
    conda:
        "../../envs/lamellume.yaml"
    shell:
        adapter(
            "attribute_shard",
            inputs=("table", "entries", "valleys", "uncertainty", "ranked", "settings"),
            outputs=("attribution",),
            wildcards=("shard",),
        )


rule refinement_list:
    input:
        attribution=shard_outputs("attribution"),
        settings=refinement_list_settings,
        code=code_files("refinement_list"),
    output:
        attribution="results/tables/attribution.parquet",
        refinement="results/tables/refinement.parquet",
        csv="results/refinement.csv",
    log:
        "results/logs/refinement_list/refinement_list.log",
    conda:
        "../../envs/lamellume.yaml"
    shell:
        adapter(
            "refinement_list",
            inputs=("attribution", "settings"),
            outputs=("attribution", "refinement", "csv"),
        )
