# lamellume: screen layered compounds for bright, strongly bound excitons.
# This file only lists the workflow's parts; see README.md for the tour.
from snakemake.utils import min_version

min_version("9.0")


configfile: "config/config.yaml"


include: "workflow/rules/common.smk"
include: "workflow/rules/keldysh.smk"
include: "workflow/rules/import.smk"
include: "workflow/rules/screen.smk"
include: "workflow/rules/collect.smk"
include: "workflow/rules/refine.smk"
include: "workflow/rules/report.smk"
include: "workflow/rules/validate.smk"


rule all:
    default_target: True
    input:
        final_outputs(),


onstart:
    remove_old_snapshots()


onsuccess:
    print(run_summary())


summary_when_nothing_to_do()
no_collection_at_exit()
