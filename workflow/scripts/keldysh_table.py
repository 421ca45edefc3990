"""Adapter of rule keldysh_table: build the Rytova-Keldysh table once."""
import adapter_args

from lamellume import io, keldysh

job = adapter_args.parse()
io.start_log(job.log)
io.save_arrays(keldysh.build_table(workers=job.threads).to_arrays(), job.one("output", "table"))
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
