"""Adapter of rule write_summary: the HTML summary and the run-to-run change report."""
import adapter_args

from lamellume import io, report

job = adapter_args.parse()
io.start_log(job.log)
settings = io.read_json(job.one("input", "settings"))
report.write_summary(
    inputs={k: job.one("input", k) for k in job.input if k not in ("code", "settings")},
    outputs={name: job.one("output", name) for name in job.output},
    settings=settings["settings"],
    history=settings["history"],
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
