"""Helpers shared by the Monte Carlo tests (test_uncertainty.py, test_refinement.py).

The settings from config/config.yaml and the helper that zeroes every input uncertainty;
the fixtures built on them (a coarse Keldysh table, the demo screened once) are in conftest.py.
"""

from __future__ import annotations

import copy
from pathlib import Path

import numpy as np
import yaml

ROOT = Path(__file__).resolve().parents[2]
#: Record columns of the input uncertainties, per entry and per valley.
UNC_ENTRY = ("eps_rel_unc", "r0_rel_unc", "scissor_unc_ev")
UNC_VALLEY = ("mass_rel_unc", "edge_unc_ev")
#: Config defaults that make every input exact.
ZERO_DEFAULTS = {"default_mass_rel": 0.0, "default_eps_rel": 0.0, "default_edge_ev": 0.0,
                 "default_r0_rel": 0.0, "default_scissor_ev": 0.0}
NO_MODEL_ERROR = {"model_rel_unc_layers": 0.0, "model_rel_unc_bulk": 0.0}
#: Config sections the propagation and the attribution read.
MC_SECTIONS = ("uncertainty", "survival", "ranking", "layers", "monolayer", "excitons", "environments",
               "structure", "emission_bands", "refinement")


def config_sections(keys=MC_SECTIONS) -> dict:
    """Deep copies of the named sections of config/config.yaml."""
    with open(ROOT / "config" / "config.yaml", encoding="utf-8") as fh:
        config = yaml.safe_load(fh)
    return {k: copy.deepcopy(config[k]) for k in keys}


def zero_uncertainty(entries, valleys, settings):
    """Copies with every input uncertainty and the models' own error zero (record values removed, defaults 0)."""
    e, v = entries.copy(), valleys.copy()
    for c in UNC_ENTRY:
        e[c] = np.nan
    for c in UNC_VALLEY:
        v[c] = np.nan
    s = copy.deepcopy(settings)
    s["uncertainty"].update(ZERO_DEFAULTS)
    s["excitons"].update(NO_MODEL_ERROR)
    return e, v, s
