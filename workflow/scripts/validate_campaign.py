"""Adapter of rule validate_campaign: check the campaign's records and print the rejects, without screening."""
import adapter_args

from lamellume import io, pipeline

job = adapter_args.parse()
io.start_log(job.log)
settings = io.read_json(job.one("input", "settings"))
records = io.read_json(job.one("input", "records"))
rejects, listed = pipeline.validate_campaign(
    pipeline.listed_paths(settings["campaign"], records, "entries"), settings["campaign"], settings["physics"])
io.write_csv(rejects, job.one("output", "rejects"))
report = pipeline.validation_report(rejects, listed, settings["campaign"], job.one("output", "rejects"))
io.write_text(report, job.one("output", "report"))
print(report, end="", flush=True)  # the console is the report's reader
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
