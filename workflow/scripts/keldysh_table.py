"""Adapter of rule keldysh_table: build the Rytova-Keldysh table once."""
import adapter_args

from flakelight import io, pipeline

job = adapter_args.parse()
io.start_log(job.log)
pipeline.build_keldysh_table(job.one("output", "table"), workers=job.threads)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
