"""One source of defaults: every default in the config schema equals the shipped config.yaml."""

import json
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[2]
SCHEMA = json.loads((ROOT / "workflow" / "schemas" / "config.schema.json").read_text())
CONFIG = yaml.safe_load((ROOT / "config" / "config.yaml").read_text())


def _leaf_defaults(node, path=()):
    """(path, default) for every schema leaf; objects with named properties are descended."""
    props = node.get("properties")
    if node.get("type") == "object" and props:
        for key, child in props.items():
            yield from _leaf_defaults(child, path + (key,))
    else:
        yield path, node.get("default", KeyError)


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
