"""Cross checks of the workflow config that a JSON schema cannot express.

The schema (workflow/schemas/config.schema.json) checks every key on its own;
:func:`cross_problems` checks keys against each other: that the ranking names a
defined environment, asks for a layer count that is screened, and so on. The
workflow runs both at start-up, before any job, and stops with one line per
problem, each naming the key path (``ranking.environment``) it is about.
"""

from __future__ import annotations

from typing import Any, Mapping

#: The one place that tells people how to change a nested setting for one run.
OVERRIDE_HINT = ("change nested settings for one run with an overlay file holding only those keys, "
                 "e.g. --configfile config/config.yaml my-overlay.yaml (config/README.md, "
                 "'Changing settings for one run')")

_KINDS = {"number": "a number", "integer": "a whole number", "boolean": "true or false"}


def _looks_like(kind: str, text: str) -> bool:
    if kind == "boolean":
        return text.strip().lower() in ("true", "false", "yes", "no")
    try:
        value = float(text)
    except ValueError:
        return False
    return kind == "number" or value == int(value)


def text_given_for_numbers(config: Any, schema: Mapping, path: str = "") -> list[str]:
    """Settings given as text where the schema wants a number, whole number or flag.

    The usual cause: a nested section on Snakemake's command line,
    ``--config 'survival={"temperature_k": 10}'``, whose inner values reach the
    workflow as text ('10'). One message per setting, naming its key path and
    how to give it instead (:data:`OVERRIDE_HINT`); checked before the schema,
    whose own message ("'10' is not of type 'number'") names no remedy.
    """
    out: list[str] = []
    kinds = schema.get("type")
    kinds = [kinds] if isinstance(kinds, str) else list(kinds or [])
    if isinstance(config, str):
        wanted = [k for k in kinds if k in _KINDS]
        if wanted and "string" not in kinds and _looks_like(wanted[0], config):
            out.append(f"{path or '(config)'}: the text {config!r} where {_KINDS[wanted[0]]} is expected. "
                       f"A nested setting given as --config '{path.split('.')[0].split('[')[0]}={{...}}' "
                       f"reaches the workflow as text; {OVERRIDE_HINT}")
    elif isinstance(config, Mapping):
        props = schema.get("properties", {})
        extra = schema.get("additionalProperties")
        for key, value in config.items():
            sub = props.get(key, extra if isinstance(extra, Mapping) else None)
            if sub is not None:
                out += text_given_for_numbers(value, sub, f"{path}.{key}" if path else str(key))
    elif isinstance(config, list) and isinstance(schema.get("items"), Mapping):
        for i, value in enumerate(config):
            out += text_given_for_numbers(value, schema["items"], f"{path}[{i}]")
    return out


def cross_problems(config: Mapping[str, Any]) -> list[str]:
    """Problems of a schema-valid config, one message per problem, each starting with its key path."""
    out: list[str] = []
    environments = config.get("environments", {})
    ranking = config.get("ranking", {})
    layers = config.get("layers", {})
    if ranking.get("environment") not in environments:
        out.append(f"ranking.environment: {ranking.get('environment')!r} is not one of the environments defined "
                   f"under environments ({', '.join(sorted(environments)) or 'none'})")
    target, most = ranking.get("target_layers"), layers.get("max_layers")
    if target is not None and most is not None and target > most:
        out.append(f"ranking.target_layers: {target} is above layers.max_layers ({most}); layer counts "
                   f"1..{most} are screened")
    window = ranking.get("window_nm")
    if window is not None and len(window) == 2 and not 0 < window[0] < window[1]:
        out.append(f"ranking.window_nm: {list(window)} must be [shortest, longest] wavelength with "
                   "0 < shortest < longest (nm)")
    weights = ranking.get("weights", {})
    if weights and not any(float(w) > 0 for w in weights.values()):
        out.append("ranking.weights: every weight is 0; give at least one a positive weight")
    if ranking.get("order_by") == "probability" and config.get("uncertainty", {}).get("samples", 1) == 0:
        out.append("ranking.order_by: 'probability' needs Monte Carlo samples, but uncertainty.samples is 0")
    seen: dict[str, int] = {}
    for i, band in enumerate(config.get("emission_bands", [])):
        name = band.get("name")
        if "min_nm" in band and "max_nm" in band and not band["min_nm"] < band["max_nm"]:
            out.append(f"emission_bands[{i}].min_nm: {band['min_nm']} is not below max_nm ({band['max_nm']}) "
                       f"of band {name!r}")
        if name in seen:
            out.append(f"emission_bands[{i}].name: {name!r} is used already by emission_bands[{seen[name]}]")
        else:
            seen[name] = i
    return out


#: Marker of a value the user must replace in a shipped profile (workflow/profiles/slurm).
PLACEHOLDER = "EDIT_ME"


def placeholder_resources(default_args, overrides) -> list[str]:
    """Cluster resources that still hold a profile's placeholder, one text per resource.

    Parameters
    ----------
    default_args : iterable of str
        The ``name=value`` texts of Snakemake's default resources.
    overrides : mapping
        Rule name -> {resource name: value text} of Snakemake's ``set-resources``.
    """
    found = [f"default-resources {a}" for a in default_args if PLACEHOLDER in str(a)]
    for rule, resources in overrides.items():
        found += [f"set-resources {rule}: {name}={value}" for name, value in resources.items()
                  if PLACEHOLDER in str(value)]
    return found


def placeholder_message(found) -> str:
    """The stop message for placeholders left in the cluster profile (empty when none)."""
    if not found:
        return ""
    return ("lamellume: the cluster profile still holds placeholders (" + "; ".join(found) + "). Set your "
            "cluster's partition and account in workflow/profiles/slurm/config.yaml (`sinfo -s` lists "
            "partitions, `sacctmgr -n -s list user $USER format=account` your accounts), or give them for this "
            "run: --default-resources slurm_partition=<partition> slurm_account=<account> runtime=60 mem_mb=2000 "
            "cpus_per_task=1. Nothing was submitted.")
