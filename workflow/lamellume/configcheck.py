"""Cross checks of the workflow config that a JSON schema cannot express.

The schema (workflow/schemas/config.schema.json) checks every key on its own;
:func:`cross_problems` checks keys against each other: that the ranking names a
defined environment, asks for a layer count that is screened, and so on. The
workflow runs both at start-up, before any job, and stops with one line per
problem, each naming the key path (``ranking.environment``) it is about.
"""

from __future__ import annotations

from typing import Any, Mapping


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
