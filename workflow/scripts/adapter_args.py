"""Command line of the rule adapters in this folder.

The rules run each adapter as ``python <adapter>.py`` with its named inputs,
outputs, wildcards and log on the command line (built by ``adapter`` in
workflow/rules/common.smk), not through Snakemake's ``script:`` directive:
that directive loads pandas into the Snakemake process and Snakemake's own
modules into every job, about half a second on a re-run that revises one
record. An adapter reads its settings from the JSON snapshot among its inputs.
"""

from __future__ import annotations

import argparse
import sys
from dataclasses import dataclass
from pathlib import Path

#: The library folder (workflow/), importable by every adapter.
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))


@dataclass(frozen=True)
class Job:
    """What the rule handed over: named file lists, wildcard values and the log path."""

    input: dict[str, list[str]]
    output: dict[str, list[str]]
    wildcards: dict[str, str]
    log: str
    threads: int = 1

    def one(self, kind: str, name: str) -> str:
        """The single path of input or output ``name`` (an error if there are several)."""
        paths = getattr(self, kind)[name]
        if len(paths) != 1:
            raise SystemExit(f"{kind} {name!r}: expected one path, got {len(paths)}")
        return paths[0]


def parse(argv: list[str] | None = None) -> Job:
    """Parse ``--input NAME PATH...``, ``--output NAME PATH...``, ``--wildcard NAME VALUE``, ``--log PATH``."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--input", nargs="+", action="append", default=[], metavar=("NAME", "PATH"))
    parser.add_argument("--output", nargs="+", action="append", default=[], metavar=("NAME", "PATH"))
    parser.add_argument("--wildcard", nargs=2, action="append", default=[], metavar=("NAME", "VALUE"))
    parser.add_argument("--log", required=True)
    parser.add_argument("--threads", type=int, default=1, help="cores Snakemake gave the job")
    args = parser.parse_args(argv)
    return Job(input={a[0]: a[1:] for a in args.input}, output={a[0]: a[1:] for a in args.output},
               wildcards={k: v for k, v in args.wildcard}, log=args.log, threads=args.threads)
