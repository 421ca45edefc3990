# Stage 3: the HTML summary for experimental teams and the run-to-run change report.


localrules:
    write_summary,


rule write_summary:
    input:
        long=rules.join_tables.output.long,
        wide=rules.rank_candidates.output.wide,
        rejects=rules.rank_candidates.output.rejects,
        entries=rules.join_tables.output.entries,
        manifest=rules.write_manifest.output[0],
        refinement=rules.refinement_list.output.refinement,
        settings=summary_settings,
        code=code_files("write_summary"),
    output:
        html="results/summary.html",
        changes="results/tables/changes.parquet",
    log:
        "results/logs/write_summary/write_summary.log",
    conda:
        "../../envs/lamellume.yaml"
    shell:
        adapter(
            "write_summary",
            inputs=("long", "wide", "rejects", "entries", "manifest", "refinement", "settings"),
            outputs=("html", "changes"),
        )
