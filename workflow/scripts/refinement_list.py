"""Adapter of rule refinement_list: the campaign's ranked list of what to recompute next."""
import adapter_args

from lamellume import io, pipeline

job = adapter_args.parse()
io.start_log(job.log)
settings = io.read_json(job.one("input", "settings"))
pipeline.run_refinement_list(
    attribution_paths=job.input["attribution"],
    settings=settings["settings"],
    outputs={name: job.one("output", name) for name in job.output},
    config_hash=settings["config_hash"],
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
