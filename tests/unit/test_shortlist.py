"""The shortlist CSV and its settings sheet: fixed headers, candidate words, ranges, score definition."""

from __future__ import annotations

import csv
import re

import numpy as np
import pandas as pd
import pytest
from scipy import constants as sc

from lamellume import io, ranking, shortlist, tables
from test_ranking import SETTINGS, tables as ranking_tables


def _ranked(rows, settings=SETTINGS):
    long, wide = ranking_tables(rows)
    return ranking.rank(long, wide, settings)


ROWS = [("a", "direct", 0.3, 0.3, 750.0),    # candidate
        ("c", "direct", 0.05, 0.1, 700.0),   # binding 0.05 eV < 3 kT = 0.078 eV at 300 K: misses binding
        ("e", "direct", 0.2, 0.1, 1000.0)]   # 1000 nm outside 600-900 nm: misses the window


def test_headers_do_not_change_with_the_settings():
    other = {**SETTINGS, "survival": {**SETTINGS["survival"], "temperature_k": 77.0},
             "environments": {"hbn": {"top": 4.5, "bottom": 4.5}, "on_glass": {"top": 1.0, "bottom": 2.1}},
             "ranking": {**SETTINGS["ranking"], "environment": "on_glass", "target_layers": 2}}
    one = shortlist.shortlist_table(_ranked(ROWS), SETTINGS)
    long, wide = ranking_tables(ROWS)
    long = long.assign(environment="on_glass", layers=2)
    two = shortlist.shortlist_table(ranking.rank(long, wide, other), other)
    assert list(one.columns) == list(two.columns) == list(tables.SHORTLIST_COLUMNS)
    assert not any(re.search(r"\d|on_glass|hbn", c.replace("16 %", "").replace("84 %", "").replace("(0-1)", ""))
                   for c in one.columns)
    # the settings the values are for are columns instead: layers, surroundings, constants, temperature
    assert two["Layers"].tolist() == [2, 2] and two["Surroundings"].tolist() == ["on_glass"] * 2
    np.testing.assert_allclose(two["Dielectric constant below"], 2.1)
    np.testing.assert_allclose(two["Temperature (K)"], 77.0)


def test_candidate_column_and_criteria_missed_in_words():
    settings = {**SETTINGS, "ranking": {**SETTINGS["ranking"], "shortlist_size": 3}}
    short = shortlist.shortlist_table(_ranked(ROWS, settings), settings)
    assert short["Compound"].tolist()[0] == "a"  # candidates first
    by_id = short.set_index("Compound")
    assert by_id.loc["a", "Candidate"] == "yes" and by_id.loc["a", "Criteria missed"] == ""
    assert by_id.loc["c", "Candidate"] == "no"
    assert by_id.loc["c", "Criteria missed"] == "binding below 3 kT at 300 K"
    assert by_id.loc["e", "Criteria missed"] == "emission 1000 nm not wholly inside 600-900 nm"  # the row's own
    # 0.3 eV binding is 300 meV (by hand); the margin 0.3 eV is 300 meV
    assert by_id.loc["a", "Binding energy (meV)"] == pytest.approx(300.0)
    assert by_id.loc["a", "Dark - bright exciton (meV)"] == pytest.approx(300.0)
    assert by_id.loc["a", "Binding / kT"] == pytest.approx(round(0.3 / (sc.k * 300.0 / sc.e), 2))


def test_percentile_ranges_and_empty_without_monte_carlo():
    ranked = _ranked(ROWS[:1])
    assert np.isnan(shortlist.shortlist_table(ranked, SETTINGS)["Binding energy 16 % (meV)"]).all()
    ranked = ranked.assign(target_binding_ev_p16=0.25, target_binding_ev_p84=0.35, target_emission_nm_p16=740.0,
                           target_emission_nm_p84=760.0, target_optical_gap_ev_p16=1.6, target_optical_gap_ev_p84=1.7,
                           p_meets_all=0.8)
    row = shortlist.shortlist_table(ranked, SETTINGS).iloc[0]
    # eV to meV by hand: 0.25 eV = 250 meV, 0.35 eV = 350 meV
    assert (row["Binding energy 16 % (meV)"], row["Binding energy 84 % (meV)"]) == (250.0, 350.0)
    assert (row["Emission wavelength 16 % (nm)"], row["Emission wavelength 84 % (nm)"]) == (740.0, 760.0)
    assert (row["Exciton energy 16 % (eV)"], row["Exciton energy 84 % (eV)"]) == (1.6, 1.7)
    assert row["Probability all criteria met"] == 0.8


def test_score_definition_states_the_score_the_ranking_computes():
    settings = {**SETTINGS, "ranking": {**SETTINGS["ranking"], "min_bound_fraction": 0.5,
                                        "weights": {"binding": 0.3, "margin": 0.3, "window": 0.3, "brightness": 0.1}}}
    text = ranking.score_definition(settings)
    # the run's numbers: weights 0.3/0.3/0.3/0.1, bound headroom over 2 decades from 0.5, margin full at 200 meV,
    # window 600-900 nm, brightness floor 1e8 s^-1 over 2 decades
    for part in ("0.3 bound", "0.3 margin", "0.3 window", "0.1 brightness", "log10((1 - 0.5)", ") / 2 capped",
                 "/ 200 meV", "inside 600-900 nm", "1e+08 s^-1"):
        assert part in text, part
    # the definition applied by hand to compound e (margin 0.1 eV, 1000 nm: outside, no Monte Carlo)
    ranked = _ranked(ROWS, settings).set_index("entry_id")
    e = ranked.loc["e"]
    by_hand = (0.3 * min(np.log10(0.5 / (1 - e["target_bound_fraction"])) / 2, 1.0) + 0.3 * min(100.0 / 200.0, 1.0)
               + 0.3 * 0.0 + 0.1 * min(np.log10(e["target_brightness_proxy_per_s"] / 1e8) / 2, 1.0))
    assert e["score"] == pytest.approx(by_hand, rel=1e-12)


def test_written_files_open_cleanly(tmp_path):
    ranked = _ranked(ROWS).assign(formula=["=HYPERLINK(1)", "F", "F"],
                                  thinning_state=["direct when thin", "indirect at every thickness", "direct when thin"],
                                  direct_through_layers=pd.array([2, None, 1], dtype="Int16"))
    io.write_csv(shortlist.shortlist_table(ranked, SETTINGS), tmp_path / "shortlist.csv")
    config = {**SETTINGS, "uncertainty": {"samples": 0}, "layers": {"max_layers": 6}}
    stamps = {"campaign": "inputs/mine", "written_utc": "2026-01-01T00:00:00+00:00", "config_hash": "abc",
              "code_version": "def", "git": "v1", "screened": 3, "candidates": 1}
    io.write_csv(shortlist.settings_table(config, stamps), tmp_path / "shortlist_settings.csv")
    with open(tmp_path / "shortlist.csv", newline="") as fh:
        rows = list(csv.reader(fh))
    assert tuple(rows[0]) == tables.SHORTLIST_COLUMNS
    assert rows[1][rows[0].index("Formula")] == "'=HYPERLINK(1)"  # a formula is neutralised (OWASP)
    # thinning: a state from the declared list and a layer count, empty (never a code) where none exists
    by_id = {row[rows[0].index("Compound")]: row for row in rows[1:]}
    assert by_id["a"][rows[0].index("Direct up to (layers)")] == "2"
    assert by_id["c"][rows[0].index("Direct up to (layers)")] == ""
    assert by_id["c"][rows[0].index("Thinning state")] == "indirect at every thickness"
    assert all(row[rows[0].index("Thinning state")] in tables.THINNING_STATES for row in rows[1:])
    with open(tmp_path / "shortlist_settings.csv", newline="") as fh:
        sheet = {row["Setting"]: row for row in csv.DictReader(fh)}
    assert sheet["temperature"]["Value"] == "300" and sheet["temperature"]["Unit"] == "K"
    assert (sheet["emission window shortest"]["Value"], sheet["emission window longest"]["Value"]) == ("600", "900")
    assert sheet["minimum dark - bright exciton"]["Value"] == "50"  # 0.05 eV in meV
    assert sheet["config hash"]["Value"] == "abc" and sheet["code version"]["Value"] == "def"
    assert sheet["campaign"]["Value"] == "inputs/mine"
    assert sheet["thickest stack computed"]["Value"] == "6"  # the thinning columns' scan, layers.max_layers
    assert "not measurements" in sheet["caution"]["Value"]
    assert sheet["score definition"]["Value"] == ranking.score_definition(config)
    assert pd.read_csv(tmp_path / "shortlist_settings.csv").columns.tolist() == list(tables.SHORTLIST_SETTINGS_COLUMNS)


def test_criteria_missed_name_the_rows_own_brightness():
    # an indirect row of the minimal tables has a dark lowest exciton 0.1 eV below the bright one
    settings = {**SETTINGS, "ranking": {**SETTINGS["ranking"], "shortlist_size": 2}}
    short = shortlist.shortlist_table(_ranked([ROWS[0], ("b", "indirect", 0.2, -0.1, 700.0)], settings), settings)
    missed = short.set_index("Compound").loc["b", "Criteria missed"]
    assert missed.split("; ")[0] == "lowest exciton dark", missed
    assert "unknown" not in missed
    # the margin miss with the row's own margin: -0.1 eV is 100 meV below (by hand), 50 meV needed (SETTINGS)
    assert missed.split("; ")[1] == "dark exciton 100 meV below the bright one (50 meV above needed)", missed
