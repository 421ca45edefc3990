"""Start-up cross checks of the config (lamellume.configcheck): every message names its key path."""

from __future__ import annotations

import copy
from pathlib import Path

import pytest
import yaml

from lamellume.configcheck import cross_problems

CONFIG = yaml.safe_load((Path(__file__).resolve().parents[2] / "config" / "config.yaml").read_text())


def changed(**edits) -> dict:
    config = copy.deepcopy(CONFIG)
    for path, value in edits.items():
        *parents, key = path.split("__")
        node = config
        for p in parents:
            node = node[int(p)] if isinstance(node, list) else node[p]
        node[int(key) if isinstance(node, list) else key] = value
    return config


def test_the_shipped_config_passes():
    assert cross_problems(CONFIG) == []


@pytest.mark.parametrize("edits, key_path", [
    ({"ranking__environment": "vacuum"}, "ranking.environment"),
    ({"ranking__target_layers": 7}, "ranking.target_layers"),
    ({"layers__max_layers": 2, "ranking__target_layers": 3}, "ranking.target_layers"),
    ({"ranking__window_nm": [1000, 550]}, "ranking.window_nm"),
    ({"ranking__weights": {"binding": 0, "margin": 0, "window": 0}}, "ranking.weights"),
    ({"ranking__order_by": "probability", "uncertainty__samples": 0}, "ranking.order_by"),
    ({"emission_bands__1__min_nm": 2000}, "emission_bands[1].min_nm"),
    ({"emission_bands__2__name": "visible"}, "emission_bands[2].name"),
])
def test_each_cross_reference_is_checked_with_its_key_path(edits, key_path):
    problems = cross_problems(changed(**edits))
    assert len(problems) == 1, problems
    assert problems[0].startswith(key_path + ":"), problems


def test_every_problem_is_reported_at_once():
    problems = cross_problems(changed(ranking__environment="vacuum", ranking__target_layers=9))
    assert [p.split(":")[0] for p in problems] == ["ranking.environment", "ranking.target_layers"]


def test_target_layers_equal_to_max_layers_is_fine():
    assert cross_problems(changed(ranking__target_layers=CONFIG["layers"]["max_layers"])) == []


def test_text_where_a_number_is_expected_names_the_key_and_the_remedy():
    from lamellume import io
    from lamellume.configcheck import text_given_for_numbers

    schema = io.load_schema("config.schema.json")
    # what Snakemake hands over for --config 'survival={"temperature_k": 10}'
    problems = text_given_for_numbers({"survival": {"temperature_k": "10"}}, schema)
    assert len(problems) == 1
    assert problems[0].startswith("survival.temperature_k: the text '10' where a number is expected")
    assert "--configfile config/config.yaml my-overlay.yaml" in problems[0]
    nested = {"environments": {"on_glass": {"top": "1", "bottom": 2.1}}, "ranking": {"window_nm": [500, "900"],
              "require_direct": "true", "shortlist_size": "3", "environment": "on_glass"}}
    paths = sorted(p.split(":")[0] for p in text_given_for_numbers(nested, schema))
    assert paths == ["environments.on_glass.top", "ranking.require_direct", "ranking.shortlist_size",
                     "ranking.window_nm[1]"]
    # real numbers, text settings and words that are not numbers are left to the schema
    assert not text_given_for_numbers({"survival": {"temperature_k": 10}, "campaign": "inputs/demo",
                                       "ranking": {"environment": "10", "shortlist_size": "many"}}, schema)


def test_placeholders_of_the_shipped_slurm_profile_are_caught(repo):
    import yaml

    from lamellume.configcheck import placeholder_message, placeholder_resources

    profile = yaml.safe_load((repo / "workflow" / "profiles" / "slurm" / "config.yaml").read_text())
    defaults = [f"{k}={v}" for k, v in profile["default-resources"].items()]
    found = placeholder_resources(defaults, profile.get("set-resources", {}))
    assert found == ["default-resources slurm_partition=EDIT_ME_partition",
                     "default-resources slurm_account=EDIT_ME_account"]
    assert "Nothing was submitted" in placeholder_message(found)
    filled = [a.replace("EDIT_ME_", "") for a in defaults]
    assert placeholder_resources(filled, {"screen_shard": {"slurm_account": "EDIT_ME_x"}}) == [
        "set-resources screen_shard: slurm_account=EDIT_ME_x"]
    assert placeholder_resources(filled, {}) == [] and placeholder_message([]) == ""
