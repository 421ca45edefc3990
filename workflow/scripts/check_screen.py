"""Adapter of rule check_screen: stop the run when no record was screened.

Runs between the shard jobs and everything that writes results/tables, the
shortlist, the page or the history, so a run that screens nothing fails before
any of them is touched (Snakemake removes a job's old outputs only when the job
starts).
"""
import sys

import adapter_args

from flakelight import io

job = adapter_args.parse()
io.start_log(job.log)
shards = [io.read_json(path) for path in job.input["counts"]]
total = {key: sum(s[key] for s in shards) for key in ("records", "screened", "rejected")}
total["reasons"] = [reason for s in shards for reason in s["reasons"]][:3]
if total["screened"] == 0:
    reasons = "; ".join(total["reasons"]) or "none given"
    message = (f"flakelight: nothing was screened: all {total['records']} record files were rejected "
               f"(first reasons: {reasons}); the tables, shortlist, page and history of the previous run are "
               "left as they were; every reason is in results/shards/*/rejects.parquet")
    print(message, file=sys.__stderr__, flush=True)
    raise SystemExit(message)
io.write_json(total, job.one("output", "counts"))
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
