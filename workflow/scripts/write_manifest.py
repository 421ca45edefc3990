"""Adapter of rule write_manifest: record what this run was made from."""
import adapter_args

from lamellume import io, pipeline

job = adapter_args.parse()
io.start_log(job.log)
settings = io.read_json(job.one("input", "settings"))
records = io.read_json(job.one("input", "records"))
pipeline.write_manifest(
    entry_paths=pipeline.listed_paths(settings["campaign"], records, "entries"),
    structure_paths=pipeline.listed_paths(settings["campaign"], records, "structures"),
    wide_path=job.one("input", "tables"),
    config=settings["config"],
    config_hash=settings["config_hash"],
    workdir=settings["workdir"],
    output=job.one("output", "manifest"),
    settings_output=job.one("output", "shortlist_settings"),
    campaign=settings["campaign"],
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
