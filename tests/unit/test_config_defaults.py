"""One source of defaults: every default in the config schema equals the shipped config.yaml."""

import json
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[2]
SCHEMA = json.loads((ROOT / "workflow" / "schemas" / "config.schema.json").read_text())
CONFIG = yaml.safe_load((ROOT / "config" / "config.yaml").read_text())


def _leaf_defaults(node):
    """(path, default) for every schema leaf (:func:`_leaves`); KeyError where none is given."""
    for path, leaf in _leaves(node):
        yield path, leaf.get("default", KeyError)


def _lookup(config, path):
    for key in path:
        config = config[key]
    return config


def test_schema_defaults_equal_shipped_config():
    # Omitting a key must not silently change the screen: the schema's default for every
    # key is the value config/config.yaml ships (common practice: one source of defaults).
    mismatches = []
    for path, default in _leaf_defaults(SCHEMA):
        try:
            shipped = _lookup(CONFIG, path)
        except KeyError:
            mismatches.append((".".join(path), default, "missing from config.yaml"))
            continue
        if default != shipped:
            mismatches.append((".".join(path), default, shipped))
    assert not mismatches, mismatches


def test_every_schema_key_has_description_and_default():
    missing = [".".join(p) for p, d in _leaf_defaults(SCHEMA) if d is KeyError]
    assert not missing, missing


README = (ROOT / "config" / "README.md").read_text()
#: Words from "Default" on that a value alone never reaches ("Default 0.3." is two): "Default X: why".
MIN_REASON_WORDS = 6


def _leaves(node, path=()):
    """(path, schema node) for every schema leaf; objects with named properties are descended."""
    props = node.get("properties")
    if node.get("type") == "object" and props:
        for key, child in props.items():
            yield from _leaves(child, path + (key,))
    else:
        yield path, node


def _from_default(text):
    """The text from the word 'default' on (any case), '' without it."""
    i = text.lower().find("default")
    return text[i:] if i >= 0 else ""


def _readme_rows():
    """{key prefix: meaning} of the config README's key table ('ranking.*' -> 'ranking', '<name>' cut)."""
    rows = {}
    for line in README.splitlines():
        if line.startswith("| `") and line.count("|") >= 3:
            key, meaning = line[3:].split("` |", 1)
            rows[key.split(".<")[0].removesuffix(".*")] = meaning
    return rows


def test_every_default_has_a_reason_in_the_schema():
    # Issue 18: every default with a one-line reason in the schema ("Default X: why", common
    # practice where no source), not only its value.
    bare = [".".join(p) for p, node in _leaves(SCHEMA)
            if len(_from_default(node.get("description", "")).split()) < MIN_REASON_WORDS]
    assert not bare, bare


def test_every_key_has_its_default_and_reason_in_the_config_readme():
    # Issue 18: the same for config/README.md; a key is covered by its own row or its closest
    # documented parent ("ranking.weights" for ranking.weights.margin, not "ranking.*").
    rows = _readme_rows()
    missing = []
    for path, _ in _leaves(SCHEMA):
        key = ".".join(path)
        covering = [k for k in rows if key == k or key.startswith(k + ".")]
        meaning = rows[max(covering, key=len)] if covering else ""
        if len(_from_default(meaning).split()) < MIN_REASON_WORDS:
            missing.append(key)
    assert not missing, missing


def test_reason_check_catches_a_bare_default():
    # the two checks above on a made-up description and table row (so they can fail)
    assert len(_from_default("Weight of the margin part. Default 0.3.").split()) < MIN_REASON_WORDS
    assert len(_from_default("Default 0.3: the three parts count alike.").split()) >= MIN_REASON_WORDS
    assert "ranking.weights" in _readme_rows() and "environments" in _readme_rows()
