"""Adapter of rule import_calculations: turn one shard's compound folders into records."""
import adapter_args

from lamellume import importer, io

job = adapter_args.parse()
io.start_log(job.log)
settings = io.read_json(job.one("input", "settings"))
listing = io.read_json(job.one("input", "listing"))
importer.run_import(
    names=sorted({row[0].split("/", 1)[0] for row in listing["calculations"]}),
    campaign=settings["campaign"],
    cache_dir=f"{settings['cache_root']}/{job.wildcards['shard']}",
    outputs={name: job.one("output", name) for name in job.output},
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
