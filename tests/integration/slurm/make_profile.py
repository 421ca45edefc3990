"""Derive the integration check's SLURM profile from workflow/profiles/slurm.

Copies the profile unchanged except for what only the test cluster knows: its
partition and account, and a shorter first status check (the test jobs take seconds).

    python make_profile.py SOURCE_PROFILE_DIR TARGET_PROFILE_DIR PARTITION ACCOUNT INIT_SECONDS
"""
import sys
from pathlib import Path

import yaml


def derive(profile: dict, partition: str, account: str, init_seconds: int) -> dict:
    """The profile with the test cluster's partition, account and status-check delay."""
    out = dict(profile)
    resources = dict(out.get("default-resources") or {})
    resources["slurm_partition"] = partition
    resources["slurm_account"] = account
    out["default-resources"] = resources
    out["slurm-init-seconds-before-status-checks"] = init_seconds
    return out


def main(source: str, target: str, partition: str, account: str, init_seconds: str) -> None:
    profile = yaml.safe_load((Path(source) / "config.yaml").read_text())
    Path(target).mkdir(parents=True, exist_ok=True)
    derived = derive(profile, partition, account, int(init_seconds))
    (Path(target) / "config.yaml").write_text(yaml.safe_dump(derived, sort_keys=False))


if __name__ == "__main__":
    main(*sys.argv[1:])
