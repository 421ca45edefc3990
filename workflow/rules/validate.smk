# A check of the campaign alone: every record and CIF through the screen's checks (schema,
# physical checks, structure analysis, a gap at every layer count), the rejects printed and
# written to results/validation/. No exciton model runs: seconds, not a screen.
# Run it with `snakemake --cores 1 validate_campaign`; `rule all` does not ask for it.


localrules:
    validate_campaign,


rule validate_campaign:
    input:
        records=campaign_records,
        settings=validate_settings,
        code=code_files("validate_campaign"),
    output:
        rejects="results/validation/rejects.csv",
        report="results/validation/report.txt",
    log:
        "results/logs/validate_campaign/validate_campaign.log",
    conda:
        "../../envs/lamellume.yaml"
    shell:
        adapter(
            "validate_campaign",
            inputs=("records", "settings"),
            outputs=("rejects", "report"),
        )
