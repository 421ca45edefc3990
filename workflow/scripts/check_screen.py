"""Adapter of rule check_screen: stop the run when no record was screened.

Runs between the shard jobs and every job that writes results/tables, the
shortlist, the page or the history, so a run that screens nothing fails before
any of them has started (Snakemake removes a job's old outputs only when the job
starts). It sits on the critical path of every re-run, so it imports nothing
beyond the standard library (no numpy through lamellume.io: a tenth of a second).
"""
import json
import os
import sys
import tempfile

import adapter_args

job = adapter_args.parse()
shards = []
for path in job.input["counts"]:
    with open(path, encoding="utf-8") as fh:
        shards.append(json.load(fh))
total = {key: sum(s[key] for s in shards) for key in ("records", "screened", "rejected")}
total["reasons"] = [reason for s in shards for reason in s["reasons"]][:3]
with open(job.log, "a", encoding="utf-8") as log:
    log.write(f"screen counts: {total}\n")
if total["screened"] == 0:
    reasons = "; ".join(total["reasons"]) or "none given"
    message = (f"lamellume: nothing was screened: all {total['records']} record files were rejected "
               f"(first reasons: {reasons}); the tables, shortlist, page and history of the previous run are "
               "left as they were; every reason is in results/shards/*/rejects.parquet")
    print(message, file=sys.stderr, flush=True)
    sys.exit(1)
target = job.one("output", "counts")
os.makedirs(os.path.dirname(target) or ".", exist_ok=True)
# A job killed while writing leaves its temporary file; the re-run clears it
# (the same rule as lamellume.io's atomic writers).
for name in os.listdir(os.path.dirname(target) or "."):
    if name.startswith(".screen_counts.") and name.endswith(".part"):
        try:
            os.unlink(os.path.join(os.path.dirname(target) or ".", name))
        except OSError:
            pass
fd, tmp = tempfile.mkstemp(prefix=".screen_counts.", suffix=".part", dir=os.path.dirname(target) or ".")
with os.fdopen(fd, "w", encoding="utf-8") as fh:
    json.dump(total, fh, indent=2, sort_keys=True)
umask = os.umask(0)
os.umask(umask)
os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; results are shared like any file
os.replace(tmp, target)
