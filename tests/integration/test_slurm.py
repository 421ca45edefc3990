"""The executor profiles, and (opt-in) the demo screen on a real single-node SLURM cluster.

The cluster check installs Debian packages, starts daemons as root and takes about
three minutes, so it runs only when asked for:

    LAMELLUME_SLURM=1 .venv/bin/python -m pytest tests/integration/test_slurm.py

It wraps tests/integration/slurm/run_slurm_check.sh; CI calls that script directly.
The profile checks below are cheap and always run.
"""
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

REPO = Path(__file__).resolve().parents[2]
PROFILES = REPO / "workflow" / "profiles"
CHECK = Path(__file__).resolve().parent / "slurm" / "run_slurm_check.sh"


def rule_names() -> set[str]:
    """Names of the rules declared in workflow/rules/*.smk."""
    pattern = re.compile(r"^rule (\w+):", re.MULTILINE)
    return {name for smk in (REPO / "workflow" / "rules").glob("*.smk")
            for name in pattern.findall(smk.read_text())}


def load_profile(name: str) -> dict:
    return yaml.safe_load((PROFILES / name / "config.yaml").read_text())


def test_slurm_profile_names_existing_rules():
    # A renamed rule would silently lose its resources or its group.
    profile = load_profile("slurm")
    named = set(profile["set-resources"]) | set(profile["groups"])
    assert named <= rule_names()


def test_slurm_profile_leaves_cluster_values_to_the_user():
    profile = load_profile("slurm")
    resources = profile["default-resources"]
    assert profile["executor"] == "slurm"
    assert resources["slurm_partition"].startswith("EDIT_ME")
    assert resources["slurm_account"].startswith("EDIT_ME")
    assert {"runtime", "mem_mb", "cpus_per_task"} <= set(resources)


def test_local_profile_is_local():
    profile = load_profile("local")
    assert "executor" not in profile
    assert profile["cores"] >= 1


@pytest.mark.slow
@pytest.mark.skipif(os.environ.get("LAMELLUME_SLURM") != "1",
                    reason="set LAMELLUME_SLURM=1 to run the demo on a local SLURM cluster")
def test_demo_on_slurm_matches_local_run():
    env = {**os.environ, "LAMELLUME_VENV": sys.prefix}
    result = subprocess.run(["bash", str(CHECK)], env=env, capture_output=True, text=True,
                            timeout=900)
    assert result.returncode == 0, result.stdout[-6000:] + result.stderr[-3000:]
