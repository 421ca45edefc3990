"""Adapter of rule keldysh_table: the Rytova-Keldysh table, shipped or built.

The repository ships the table (``workflow/data/keldysh_table.npz``) with the build
description it was made from (``keldysh_table.json``: a key over the sources of the
modules the build runs and the numpy and scipy versions, ``provenance.keldysh_table_build``).
When that key equals the key of the code and libraries at hand, a fresh build would
write the same arrays, so the shipped file is copied; otherwise (the Keldysh code or a
solver library changed) the table is built here, as without a shipped one.

Run by hand without ``--input`` to build afresh; ``--output build PATH`` then also writes
the build description (this is how DEVELOPERS.md refreshes the shipped pair).
"""
import logging

import adapter_args

from lamellume import io, provenance

job = adapter_args.parse()
io.start_log(job.log)
table = job.one("output", "table")
build = provenance.keldysh_table_build()
shipped = io.read_json(job.one("input", "shipped_build")) if "shipped_build" in job.input else None
if shipped is not None and shipped["key"] == build["key"]:
    io.copy_file(job.one("input", "shipped"), table)
    logging.info("shipped Keldysh table taken (build key %s)", build["key"])
else:
    from lamellume import keldysh

    if shipped is not None:
        logging.info("shipped Keldysh table not taken: built with %s, this code and its libraries need "
                     "%s; building it", shipped, build)
    io.save_arrays(keldysh.build_table(workers=job.threads).to_arrays(), table)
if "build" in job.output:
    io.write_json(build, job.one("output", "build"))
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
