"""Every column of every output table, declared once: dtype, unit, description.

The writers of :mod:`lamellume.io` take each field's unit and description
(Arrow field metadata) from here, :func:`pandas_dtype` gives the typed empty
and normalised frames their dtypes, and ``docs/columns.md`` is generated from
this module (``python -m lamellume.tables > docs/columns.md``; a test checks
it is current). A column name means the same thing in every table it appears
in. Families of columns (one per layer count, per surroundings, per
percentile) are declared once as a pattern (:data:`PATTERNS`).

Units: ``eV``, ``meV``, ``nm``, ``Angstrom``, ``m_e``, ``K``, ``deg``, ``cm^-2``, ``1``
(a dimensionless number) and ``-`` (text, identifier or flag: not a quantity).
Arrow types: ``string`` (stored as large_string), ``float64``, ``int16``,
``int32``, ``int64``, ``bool``; ``Int16`` is an int16 that may be empty (pandas'
nullable ``Int16``): a count that does not exist for some rows is empty, never a
sentinel number. Text columns with a fixed list of values declare the list here
too (:data:`VOCABULARIES`).

Pure declarations: no I/O, no physics.
"""

from __future__ import annotations

import re
from typing import NamedTuple

#: Unit of a column that holds text, an identifier or a flag.
NO_UNIT = "-"


class Column(NamedTuple):
    """One declared column."""

    name: str
    dtype: str
    unit: str
    description: str


def _declare(rows) -> dict[str, Column]:
    out: dict[str, Column] = {}
    for name, dtype, unit, description in rows:
        if name in out:
            raise ValueError(f"column {name!r} declared twice")
        out[name] = Column(name, dtype, unit, description)
    return out


S, F, B = "string", "float64", "bool"

# Values of ``thinning_state``: the band-gap character from the monolayer (1 layer) through
# max_layers layers to bulk, scanned in that order.
DIRECT_EVERYWHERE = "direct at every thickness"
INDIRECT_EVERYWHERE = "indirect at every thickness"
DIRECT_WHEN_THIN = "direct when thin"
INDIRECT_WHEN_THIN = "indirect when thin"
DIRECT_EXCEPT_BULK = "direct except in bulk"
INDIRECT_EXCEPT_BULK = "indirect except in bulk"
UNKNOWN_MONOLAYER = "unknown as a monolayer"
UNKNOWN_BEYOND = "unknown beyond"

#: The values ``thinning_state`` takes, with their meanings (docs/columns.md lists them).
THINNING_STATES: dict[str, str] = {
    DIRECT_EVERYWHERE: "direct gap at every layer count 1..max_layers and in bulk",
    INDIRECT_EVERYWHERE: "indirect gap at every layer count 1..max_layers and in bulk",
    DIRECT_WHEN_THIN: "direct as a monolayer; the gap first turns indirect at switch_layers layers "
                      "(direct_through_layers = switch_layers - 1)",
    INDIRECT_WHEN_THIN: "indirect as a monolayer; the gap first turns direct at switch_layers layers",
    DIRECT_EXCEPT_BULK: "direct at every layer count 1..max_layers, indirect in bulk",
    INDIRECT_EXCEPT_BULK: "indirect at every layer count 1..max_layers, direct in bulk",
    UNKNOWN_MONOLAYER: "the monolayer's gap character cannot be decided from the record (band edges missing); "
                       "direct_through_layers and switch_layers are empty",
    UNKNOWN_BEYOND: "the gap character cannot be decided at a thicker layer count before any change was seen; "
                    "direct_through_layers is a lower bound, switch_layers is empty",
}

#: Text columns whose values come from a fixed list: column -> {value: meaning}.
VOCABULARIES: dict[str, dict[str, str]] = {"thinning_state": THINNING_STATES}

_TENSOR = ("xx", "yy", "zz", "xy", "xz", "yz")

#: Stamps every row carries (traceability).
_STAMPS = [
    ("input_hash", S, NO_UNIT, "content hash of the record file and its CIF (the row's input)"),
    ("physics_hash", S, NO_UNIT, "hash of the physics settings the row was computed with"),
    ("code_version", S, NO_UNIT, "content hash of the library modules the row was computed with"),
    ("config_hash", S, NO_UNIT, "hash of the whole config of the run that wrote the table"),
    ("settings_hash", S, NO_UNIT, "hash of the settings of the Monte Carlo propagation"),
]

_ENTRY = [
    ("entry_id", S, NO_UNIT, "compound identifier (the record's id, equal to its file name stem)"),
    ("source_file", S, NO_UNIT, "record file name in the campaign's entries/ folder"),
    ("formula", S, NO_UNIT, "chemical formula as given by the record"),
    ("provenance", S, NO_UNIT, "where the record's numbers come from, as given"),
    ("energy_reference", S, NO_UNIT, "energy zero of the record's band edges, as given"),
    ("structure_file", S, NO_UNIT, "CIF file name in the campaign's structures/ folder ('' if none)"),
    ("structure_hash", S, NO_UNIT, "SHA-256 of the CIF bytes ('' if none)"),
    ("source_hashes", S, NO_UNIT, "for an imported record: 'file=sha256' of each calculation file it was made from"),
    ("dielectric_frame", S, NO_UNIT, "frame of the given dielectric tensors: 'layer' or 'crystal'"),
    ("normal_x", F, "1", "layer normal, Cartesian x component (crystal frame)"),
    ("normal_y", F, "1", "layer normal, Cartesian y component (crystal frame)"),
    ("normal_z", F, "1", "layer normal, Cartesian z component (crystal frame)"),
    ("normal_source", S, NO_UNIT, "where the layer normal comes from: layer frame, record, structure, assumed z"),
    *[(f"eps_inf_{c}", F, "1", f"electronic (high-frequency) dielectric tensor, layer frame, {c} component")
      for c in _TENSOR],
    *[(f"eps_static_{c}", F, "1", f"static dielectric tensor, layer frame, {c} component (NaN if not given)")
      for c in _TENSOR],
    ("eps_rel_unc", F, "1", "relative standard uncertainty of the dielectric tensor (NaN: config default)"),
    ("spacing_source", S, NO_UNIT, "where the interlayer spacing comes from: record or structure"),
    ("lattice_source", S, NO_UNIT, "where the in-plane lattice constant comes from: record or structure"),
    ("is_layered_structure", B, NO_UNIT, "the CIF shows 2D-bonded layers (null without a CIF)"),
    ("vdw_gap_angstrom", F, "Angstrom", "van der Waals gap between layers found in the CIF (NaN without)"),
    ("r0_given_angstrom", F, "Angstrom", "monolayer screening length given by the record (NaN: bulk estimate)"),
    ("r0_source", S, NO_UNIT, "source of the monolayer screening length: record r0, record alpha_2D, bulk estimate"),
    ("r0_rel_unc", F, "1", "relative standard uncertainty of r0 (NaN: config default)"),
    ("scissor_ev", F, "eV", "scissor shift added to every conduction edge"),
    ("scissor_unc_ev", F, "eV", "standard uncertainty of the scissor shift (NaN: config default)"),
    ("edge_eps_top", F, "1", "dielectric constant above the slab the band edges were computed in (1: vacuum)"),
    ("edge_eps_bottom", F, "1", "dielectric constant below the slab the band edges were computed in (1: vacuum)"),
    ("edge_method", S, NO_UNIT, "method of the band-edge calculation, as given ('not stated' if not)"),
    ("gap_t_form", S, NO_UNIT, "form of the gap's temperature dependence: varshni, bose-einstein or '' (none given)"),
    ("gap_t_alpha_ev_per_k", F, "eV/K", "Varshni alpha of E(T) = E(0) - alpha T^2/(T + beta)"),
    ("gap_t_beta_k", F, "K", "Varshni beta"),
    ("gap_t_coupling", F, "1", "electron-phonon coupling S of the Bose-Einstein form"),
    ("gap_t_phonon_ev", F, "eV", "mean phonon energy of the Bose-Einstein form"),
    ("gap_t_reference_k", F, "K", "temperature the band edges were computed at (NaN without a temperature form)"),
    ("warnings", S, NO_UNIT, "warnings raised while reading the record, joined by ' | '"),
]

_VALLEY = [
    ("valley_index", "int64", "1", "position of the valley in the record's valley list (-1: not a valley's row)"),
    ("label", S, NO_UNIT, "Brillouin-zone label of the valley, as given"),
    ("band", S, NO_UNIT, "'valence' or 'conduction'"),
    ("inv_mass_xx", F, "1/m_e", "in-plane inverse-mass tensor, xx component (carrier sign)"),
    ("inv_mass_xy", F, "1/m_e", "in-plane inverse-mass tensor, xy component"),
    ("inv_mass_yy", F, "1/m_e", "in-plane inverse-mass tensor, yy component"),
    ("mass_perp_me", F, "m_e", "out-of-plane effective mass (NaN if not given)"),
    ("mass_source", S, NO_UNIT, "'given' or 'fitted' (from band samples)"),
    ("mass_fit_rms_ev", F, "eV", "rms residual of the band-sample mass fit (NaN if given)"),
    ("mass_nonparabolic", B, NO_UNIT, "the band samples show a notable quartic term"),
    ("mass_rel_unc", F, "1", "relative standard uncertainty of the masses (NaN: config default)"),
    ("edge_unc_ev", F, "eV", "standard uncertainty of the band edges (NaN: config default)"),
    ("degeneracy", F, "1", "valley degeneracy (equivalent valleys in the Brillouin zone; 1 if not given)"),
    ("spin_split_ev", F, "eV", "spin splitting of the valley's band (NaN if not given)"),
    ("edge_spin", "int64", "1", "spin sub-band of the given edge: 1 up, -1 down, 0 not stated"),
]

_REJECT = [
    ("field", S, NO_UNIT, "record field the problem concerns ('(file)' for the file as a whole)"),
    ("reason", S, NO_UNIT, "what is wrong, in words"),
    ("stage", S, NO_UNIT, "step that rejected the record: read, duplicate, contract, structure, normalise"),
]

#: Every value of the rejects table's ``stage`` column in plain words (the page and the
#: validate-only target show these).
STAGE_WORDS = {
    "skipped": "file name not read (hidden, other letter case or more after .json)",
    "read": "file could not be read as JSON",
    "duplicate": "identifier differs from another only in letter case",
    "contract": "record breaks the input contract (schema or physical checks)",
    "structure": "structure file (CIF) could not be analysed",
    "normalise": "record could not be turned into layer-frame values (or has no gap)",
    "import": "calculation folder could not be turned into a record",
}


def stage_words(stage: str) -> str:
    """A reject stage in plain words (the stage name itself when unknown)."""
    return STAGE_WORDS.get(str(stage), str(stage))


_LONG = [
    ("layers", "int16", "1", "layer count; 0 = bulk crystal"),
    ("environment", S, NO_UNIT, "surroundings (config environments) or 'bulk crystal'"),
    ("gap_character", S, NO_UNIT, "'direct', 'indirect' or 'unknown' at this layer count"),
    ("vbm_ev", F, "eV", "valence-band maximum on the record's energy reference"),
    ("cbm_ev", F, "eV", "conduction-band minimum including the scissor shift"),
    ("fundamental_gap_ev", F, "eV", "CBM - VBM"),
    ("direct_gap_ev", F, "eV", "lowest same-label (vertical) transition"),
    ("indirect_gap_ev", F, "eV", "lowest transition between different labels"),
    ("direct_margin_ev", F, "eV", "indirect - direct gap: > 0 bright, < 0 dark"),
    ("vbm_label", S, NO_UNIT, "label of the valence-band maximum"),
    ("cbm_label", S, NO_UNIT, "label of the conduction-band minimum"),
    ("direct_label", S, NO_UNIT, "label of the lowest direct (bright) pair"),
    ("mu_inplane_me", F, "m_e", "in-plane reduced mass of the bright pair (geometric mean of principal values)"),
    ("mu_small_me", F, "m_e", "smaller principal in-plane reduced mass of the bright pair"),
    ("mu_large_me", F, "m_e", "larger principal in-plane reduced mass of the bright pair"),
    ("mu_angle_deg", F, "deg", "angle of the axis of mu_small_me (the lighter principal reduced mass of the bright pair) from the "
     "layer-frame x axis, counter-clockwise seen from +z"),
    ("mu_dark_me", F, "m_e", "in-plane reduced mass of the fundamental (VBM, CBM) pair"),
    ("r0_angstrom", F, "Angstrom", "Rytova-Keldysh screening length of the N-layer stack"),
    ("kappa", F, "1", "mean dielectric constant of the surroundings (bulk rows: the crystal's sqrt(eps_par eps_perp))"),
    ("binding_model", S, NO_UNIT, "model of binding_ev: rytova-keldysh, 3d-anisotropic or 3d-hydrogenic"),
    ("binding_ev", F, "eV", "bright-exciton binding energy of the row's model (binding_model)"),
    ("binding_2s_ev", F, "eV", "2s binding energy (Rytova-Keldysh; bulk rows: the bulk model's 1s binding / 4)"),
    ("binding_3s_ev", F, "eV", "3s binding energy (Rytova-Keldysh; bulk rows: the bulk model's 1s binding / 9)"),
    ("radius_angstrom", F, "Angstrom",
     "in-plane rms radius sqrt(<x^2 + y^2>) of the 1s exciton of the row's model (binding_model) on every row"),
    ("binding_2d_hydrogenic_ev", F, "eV", "2D hydrogenic binding with the configured constant"),
    ("binding_olsen_ev", F, "eV", "quick estimate of Olsen et al. (2016)"),
    ("dark_binding_ev", F, "eV", "binding of the fundamental-pair (momentum-dark) exciton"),
    ("dark_exciton_ev", F, "eV",
     "lowest dark exciton energy over every valley pair (momentum- or spin-dark): pair gap - its own binding; "
     "NaN if no dark pair is given"),
    ("bright_exciton_ev", F, "eV",
     "lowest bright exciton energy over every same-label, spin-allowed valley pair: pair gap - its own binding"),
    ("exciton_margin_ev", F, "eV", "dark - bright exciton energy: > 0 the lowest exciton is bright"),
    ("brightness", S, NO_UNIT,
     "exciton-level verdict: 'bright' (lowest exciton bright), 'dark', or 'unknown' (no dark competitor given)"),
    ("bright_pair", S, NO_UNIT, "valley pair of the lowest bright exciton, valence->conduction (spin if given)"),
    ("dark_pair", S, NO_UNIT, "valley pair of the lowest dark exciton, valence->conduction (spin if given)"),
    ("bright_weight", F, "1", "Boltzmann weight g M^(d/2) of the lowest bright exciton (valley degeneracy, "
     "centre-of-mass mass in m_e; d = 2 layers, 3 bulk)"),
    ("dark_weight", F, "1", "Boltzmann weight g M^(d/2) of the lowest dark exciton"),
    ("bright_fraction", F, "1", "thermal bright fraction at the operating temperature: Boltzmann occupation of "
     "the lowest bright vs the lowest dark exciton (NaN: no dark competitor, unknown)"),
    ("bright_mass_me", F, "m_e", "centre-of-mass (translational) mass of the lowest bright exciton, "
     "sqrt(det(M_e + M_h)) in the plane"),
    ("radiative_rate_0_per_s", F, "1/s",
     "layer rows: intrinsic radiative rate of the lowest bright exciton at zero in-plane momentum (Andreani 1991; "
     "Kane energy from two-band k.p, |phi(0)|^2 from the Rytova-Keldysh rms radius, index sqrt(kappa)); "
     "a model estimate, NaN on bulk rows"),
    ("radiative_rate_thermal_per_s", F, "1/s",
     "layer rows: thermal average of radiative_rate_0_per_s over a Boltzmann gas of bright excitons at the "
     "operating temperature, (4/3) Gamma_0 E_c / kT (model estimate)"),
    ("brightness_proxy_per_s", F, "1/s",
     "layer rows: radiative_rate_thermal_per_s x bright_fraction, the brightness proxy of the score's "
     "tie-breaker (model estimate; NaN when the brightness is unknown)"),
    ("binding_beyond_validity", B, NO_UNIT,
     "binding above excitons.max_binding_fraction of the direct gap: outside the effective-mass model's validity"),
    ("spin_given", B, NO_UNIT, "the record gives spin sub-bands (without them every same-label pair counts as bright)"),
    ("optical_gap_ev", F, "eV", "lowest bright exciton energy (equals bright_exciton_ev; direct gap - binding_ev "
     "unless spin sub-bands or another same-label pair decide); empty where that energy is not positive, i.e. the "
     "binding reaches the direct gap (outside the effective-mass model, see binding_beyond_validity; "
     "bright_exciton_ev and brightness keep their values)"),
    ("emission_nm", F, "nm", "vacuum wavelength of the lowest bright exciton (band edges as given: no gap shift)"),
    ("optical_gap_compensated_ev", F, "eV",
     "other end of the optical-gap bracket: lowest bright exciton if the quasiparticle gap shrank with the "
     "surroundings' screening exactly as the binding falls (full compensation; the optical gap of the record's "
     "band_edge_origin surroundings); empty where that energy is not positive (the binding in those surroundings "
     "reaches the direct gap, see binding_beyond_validity)"),
    ("emission_compensated_nm", F, "nm", "vacuum wavelength at optical_gap_compensated_ev"),
    ("emission_band", S, NO_UNIT, "named spectral band of the emission (config emission_bands)"),
    ("mott_density_per_cm2", F, "cm^-2",
     "layer rows: 2D Mott density estimate 1/(pi r^2) with r = radius_angstrom (empty on bulk rows)"),
    ("mott_density_3d_per_cm3", F, "cm^-3",
     "bulk rows: 3D Mott density (0.26/a)^3 with a the geometric mean (a_par^2 a_perp)^(1/3) of the bulk "
     "model's 1s decay lengths (Edwards-Sienko criterion; empty on layer rows)"),
    ("temperature_k", F, "K", "operating temperature (config survival)"),
    ("binding_over_kt", F, "1", "binding energy over kT at the operating temperature"),
    ("survives_kt", B, NO_UNIT, "binding energy above kT"),
    ("bound_fraction", F, "1", "layer rows: bound-exciton fraction of the 2D Saha equation at the areal pair density survival.pair_density_per_cm2 (empty on bulk rows)"),
    ("bound_fraction_3d", F, "1", "bulk rows: bound-exciton fraction of the 3D Saha equation at the volume pair density survival.pair_density_per_cm3 (empty on layer rows)"),
    ("wannier_ok", B, NO_UNIT,
     "in-plane rms radius radius_angstrom above wannier_ratio lattice constants (effective-mass picture holds)"),
]

_WIDE = [
    ("eps_parallel", F, "1", "in-plane electronic dielectric constant (mean of in-plane eigenvalues)"),
    ("eps_perpendicular", F, "1", "out-of-plane electronic dielectric constant"),
    ("eps_inplane_anisotropy", F, "1", "(max - min)/mean of in-plane eigenvalues"),
    ("eps_bulk", F, "1", "sqrt(eps_parallel eps_perpendicular)"),
    ("eps_static_parallel", F, "1", "in-plane static dielectric constant (if given)"),
    ("eps_static_perpendicular", F, "1", "out-of-plane static dielectric constant (if given)"),
    ("spacing_angstrom", F, "Angstrom", "interlayer repeat distance"),
    ("lattice_angstrom", F, "Angstrom", "in-plane lattice constant"),
    ("r0_monolayer_angstrom", F, "Angstrom", "monolayer screening length"),
    ("gap_character_1l", S, NO_UNIT, "gap character of the monolayer"),
    ("bright_valley_1l", S, NO_UNIT, "label of the monolayer's lowest direct pair"),
    ("gap_1l_ev", F, "eV", "monolayer fundamental gap"),
    ("direct_gap_1l_ev", F, "eV", "monolayer lowest direct gap"),
    ("margin_1l_ev", F, "eV", "monolayer indirect - direct gap"),
    ("gap_character_bulk", S, NO_UNIT, "gap character of the bulk crystal"),
    ("gap_bulk_ev", F, "eV", "bulk fundamental gap"),
    ("direct_gap_bulk_ev", F, "eV", "bulk lowest direct gap"),
    ("thinning_state", S, NO_UNIT,
     "how the band-gap character changes from the monolayer to bulk, one of a fixed list of values "
     "(THINNING_STATES; listed below the tables)"),
    ("direct_through_layers", "Int16", "1",
     "thickest layer count N such that the gap is direct at every count 1..N (thinning to N layers or fewer "
     "gives a direct gap); empty when the monolayer is indirect or unknown; a lower bound when thinning_state "
     "is 'unknown beyond'"),
    ("switch_layers", "Int16", "1",
     "thinnest layer count (2..max_layers) whose gap character differs from the monolayer's; empty when "
     "every computed layer count has the monolayer's character (thinning_state says whether bulk differs)"),
    ("thinning_verdict", S, NO_UNIT, "how the gap character changes with thinning, in words (with the layer counts)"),
    ("mu_1l_me", F, "m_e", "monolayer bright-pair in-plane reduced mass"),
    ("mu_bulk_me", F, "m_e", "bulk bright-pair in-plane reduced mass"),
    ("mu_bulk_perp_me", F, "m_e", "bulk bright-pair out-of-plane reduced mass"),
    ("bulk_binding_ev", F, "eV", "3D hydrogenic binding, geometric-mean constant"),
    ("bulk_radius_angstrom", F, "Angstrom",
     "in-plane rms radius of the bulk 1s exciton, of the model of the bulk row's binding (as radius_angstrom)"),
    ("bulk_binding_aniso_ev", F, "eV", "anisotropic 3D variational binding"),
    ("quasi2d_binding_ev", F, "eV", "2D hydrogenic binding with the bulk constant (4x bulk)"),
    ("quasi2d_radius_angstrom", F, "Angstrom", "2D Bohr radius (1s decay length) with the bulk constant"),
    ("bulk_optical_gap_ev", F, "eV", "lowest bright bulk exciton energy (bulk direct gap - bulk binding); empty "
     "where the binding reaches the direct gap (see the bulk row's binding_beyond_validity)"),
    ("gap_temperature_k", F, "K",
     "temperature every gap, optical gap and wavelength of this compound refers to: the operating temperature "
     "when the record gives gap_temperature; empty: the calculation's temperature (no thermal shift given)"),
    ("gap_thermal_shift_ev", F, "eV",
     "change of every gap from the calculation's temperature to the operating temperature (record "
     "gap_temperature: Varshni or Bose-Einstein form); empty: none given, emission at the calculation's "
     "temperature"),
    ("edge_fit_rms_ev", F, "eV", "largest rms residual of the layer-count confinement fit over the compound's valleys"),
    ("rank_environment", S, NO_UNIT, "surroundings the ranking uses (config ranking.environment)"),
    ("rank_layers", "int64", "1", "layer count the ranking uses (config ranking.target_layers)"),
    ("target_gap_character", S, NO_UNIT, "gap character at the target layer count"),
    ("target_optical_gap_ev", F, "eV", "bright exciton energy at the target layer count in the ranking environment;"
     " empty where the binding reaches the direct gap (see binding_beyond_validity)"),
    ("target_emission_nm", F, "nm", "emission wavelength at the target layer count in the ranking environment"),
    ("target_emission_band", S, NO_UNIT, "spectral band of the target emission"),
    ("target_binding_ev", F, "eV", "Rytova-Keldysh binding at the target layer count in the ranking environment"),
    ("target_binding_over_kt", F, "1", "target binding over kT at the operating temperature"),
    ("target_direct_margin_ev", F, "eV", "indirect - direct gap at the target layer count"),
    ("target_bound_fraction", F, "1", "2D Saha bound fraction at the target layer count"),
    ("target_wannier_ok", B, NO_UNIT, "effective-mass picture holds at the target layer count"),
    ("target_radius_angstrom", F, "Angstrom", "exciton rms radius at the target layer count"),
    ("target_brightness", S, NO_UNIT, "exciton-level verdict at the target layer count in the ranking environment"),
    ("target_bright_exciton_ev", F, "eV", "lowest bright exciton energy at the target"),
    ("target_dark_exciton_ev", F, "eV", "lowest dark exciton energy at the target"),
    ("target_exciton_margin_ev", F, "eV", "dark - bright exciton energy at the target"),
    ("target_bright_pair", S, NO_UNIT, "valley pair of the lowest bright exciton at the target"),
    ("target_dark_pair", S, NO_UNIT, "valley pair of the lowest dark exciton at the target"),
    ("target_bright_fraction", F, "1", "thermal bright fraction at the target"),
    ("target_radiative_rate_0_per_s", F, "1/s", "intrinsic radiative rate of the lowest bright exciton at the target"),
    ("target_radiative_rate_thermal_per_s", F, "1/s", "thermally averaged radiative rate at the target"),
    ("target_brightness_proxy_per_s", F, "1/s", "brightness proxy (thermal rate x bright fraction) at the target"),
    ("target_mott_density_per_cm2", F, "cm^-2", "2D Mott density estimate at the target (pump below it)"),
    ("target_binding_beyond_validity", B, NO_UNIT, "target binding outside the effective-mass model's validity"),
    ("target_spin_given", B, NO_UNIT, "the record gives spin sub-bands"),
    ("target_optical_gap_compensated_ev", F, "eV", "full-compensation end of the optical-gap bracket at the target;"
     " empty where the binding reaches the direct gap (see binding_beyond_validity)"),
    ("target_emission_compensated_nm", F, "nm", "full-compensation end of the emission bracket at the target"),
    ("pass_direct", B, NO_UNIT, "criterion: the lowest exciton at the target is bright (exciton level; 'unknown' "
     "fails), or its verdict is known if require_direct is false"),
    ("pass_margin", B, NO_UNIT, "criterion: dark - bright exciton energy at least min_direct_margin_ev"),
    ("pass_bright_fraction", B, NO_UNIT, "criterion: thermal bright fraction at least min_bright_fraction "
     "(always true when it is 0)"),
    ("pass_binding", B, NO_UNIT, "criterion: 2D Saha bound fraction at the planned pair density "
     "(survival.pair_density_per_cm2) at least min_bound_fraction, and binding at least min_binding_over_kt "
     "times kT (0 = off)"),
    ("pass_window", B, NO_UNIT, "criterion: both ends of the emission bracket (no gap shift, full compensation) "
     "inside the target window"),
    ("meets_all_criteria", B, NO_UNIT, "every ranking criterion holds (a candidate)"),
    ("score_binding", F, "1", "bound part of the score in [0, 1]: decades by which the unbound share at the "
     "planned pair density lies below the one min_bound_fraction allows, over 2"),
    ("score_margin", F, "1", "margin part of the score in [0, 1]: dark - bright exciton energy over 0.2 eV"),
    ("score_window", F, "1", "window part of the score in [0, 1]: Monte Carlo probability that the emission "
     "bracket lies in the target window (pass/fail without the Monte Carlo)"),
    ("score_brightness", F, "1", "brightness part of the score in [0, 1] (tie-breaker): "
     "log10(brightness proxy / 1e8 s^-1) / 2"),
    ("score", F, "1", "weighted mean of the score components, in [0, 1]"),
    ("rank", "int32", "1", "position in the ranked list (candidates first)"),
]

_UNCERTAINTY = [
    ("p_gap_direct", F, "1", "probability that the band gap is direct at the target layer count"),
    ("p_meets_all", F, "1", "probability that every ranking criterion is met given the input uncertainties (Monte Carlo; a model estimate)"),
    ("p_pass_direct", F, "1", "probability that the brightness criterion is met (the lowest exciton at the target is bright) given the input uncertainties (Monte Carlo; a model estimate)"),
    ("p_pass_margin", F, "1", "probability that the exciton-level (dark - bright) margin criterion is met given the input uncertainties (Monte Carlo; a model estimate)"),
    ("p_pass_binding", F, "1", "probability that the bound criterion (bound fraction, binding/kT) is met given the input uncertainties (Monte Carlo; a model estimate)"),
    ("p_pass_window", F, "1", "probability that the emission lies in the target window given the input uncertainties (Monte Carlo; a model estimate)"),
    ("n_samples", "int32", "1", "Monte Carlo samples per compound (0 = propagation disabled)"),
    ("seed", "int64", "1", "campaign seed; each compound's stream also depends on its identifier"),
]

_CHANGES = [
    ("change", S, NO_UNIT, "most important change of the compound since the previous run"),
    ("detail", S, NO_UNIT, "every change of the compound in plain words"),
    ("old_rank", "int32", "1", "rank in the previous run (null if absent)"),
    ("new_rank", "int32", "1", "rank in this run (null if absent)"),
    ("rank_change", "int32", "1", "old rank - new rank: > 0 moved up the list"),
    ("old_score", F, "1", "score in the previous run"),
    ("new_score", F, "1", "score in this run"),
    ("was_candidate", B, NO_UNIT, "met every criterion in the previous run"),
    ("is_candidate", B, NO_UNIT, "meets every criterion in this run"),
    ("input_revised", B, NO_UNIT, "the record or its CIF changed (input_hash differs)"),
    ("old_input_hash", S, NO_UNIT, "input hash in the previous run"),
    ("new_input_hash", S, NO_UNIT, "input hash in this run"),
]

_REFINEMENT = [
    ("output", S, NO_UNIT, "attributed output: meets_all, pass_direct, pass_margin, pass_binding, "
                           "pass_window, on_shortlist (0/1 verdicts), target_binding_ev, target_optical_gap_ev"),
    ("input_group", S, NO_UNIT, "input group: kind, and valley label and band for per-valley groups"),
    ("input_kind", S, NO_UNIT, "mass, dielectric, screening_length, band_edges, scissor or model_error"),
    ("p_on_shortlist", F, "1", "probability that the compound is on the shortlist with every other compound at "
                               "its rank: fraction of the N base samples of matrix A (NaN when membership is not "
                               "attributed)"),
    ("shortlist_cut", S, NO_UNIT, "the ranking key (candidate, score, compound) of the shortlist_size-th other "
                                  "compound that on_shortlist is measured against ('none': fewer other compounds "
                                  "than the shortlist size; '' when not attributed); part of the record's cache key"),
    ("verdict", S, NO_UNIT, "the verdict in doubt: meets_all (meets every criterion), on_shortlist (makes the "
                            "shortlist) or both (membership follows the criteria in every sample)"),
    ("mean", F, "output unit", "mean of the output over the base samples (for a verdict: its probability)"),
    ("variance", F, "output unit squared", "variance of the output over the base samples"),
    ("share_first", F, "1", "first-order Sobol index (Saltelli 2010): expected fraction of the variance "
                            "removed if this input were known exactly"),
    ("share_first_se", F, "1", "standard error of share_first"),
    ("share_total", F, "1", "total Sobol index (Jansen 1999): fraction of the variance this input takes "
                            "part in, interactions included"),
    ("share_total_se", F, "1", "standard error of share_total"),
    ("share_halved", F, "1", "expected fraction of the variance removed if this input's standard uncertainty "
                             "were halved (NaN when not computed)"),
    ("share_halved_se", F, "1", "standard error of share_halved"),
    ("n_base", "int32", "1", "base samples N of the pick-freeze design"),
    ("recompute", S, NO_UNIT, "what a recomputation of this input would be"),
    ("expected_effect", F, "1", "expected drop of the verdict's variance p(1-p) if this input's uncertainty "
                                "were halved (or removed, per refinement.effect)"),
    ("mostly_through", S, NO_UNIT, "the criterion whose outcome this input moves most"),
    ("advice", S, NO_UNIT, "the recommendation in plain words"),
]

#: results/shortlist.csv: plain headers for people, fixed whatever the settings (the layer count,
#: surroundings and temperature the values are for are columns, not parts of headers).
_SHORTLIST = [
    ("Rank", "int32", "1", "position in the ranked list (candidates first)"),
    ("Compound", S, NO_UNIT, "compound identifier (the record's id)"),
    ("Formula", S, NO_UNIT, "chemical formula as given by the record"),
    ("Candidate", S, NO_UNIT, "'yes' when the compound meets every ranking criterion, else 'no'"),
    ("Criteria missed", S, NO_UNIT, "the ranking criteria the compound misses, in words ('' for a candidate)"),
    ("Layers", "int16", "1", "layer count every value of the row is for (config ranking.target_layers)"),
    ("Surroundings", S, NO_UNIT, "surroundings every value of the row is for (config ranking.environment)"),
    ("Dielectric constant above", F, "1", "relative permittivity above the flake in those surroundings"),
    ("Dielectric constant below", F, "1", "relative permittivity below the flake in those surroundings"),
    ("Temperature (K)", F, "K", "operating temperature of Binding / kT and Bright fraction"),
    ("Gap character", S, NO_UNIT, "'direct', 'indirect' or 'unknown' band gap at that layer count"),
    ("Thinning behaviour", S, NO_UNIT, "how the gap character changes with thinning, in words"),
    ("Thinning state", S, NO_UNIT,
     "Thinning behaviour as one of eight fixed values, for filtering (listed with their meanings at the end of "
     "this page, column thinning_state)"),
    ("Direct up to (layers)", "Int16", "1",
     "thickest layer count N with a direct gap at every count 1..N; empty when the monolayer is not direct"),
    ("Exciton energy (eV)", F, "eV", "lowest bright exciton energy (optical gap)"),
    ("Exciton energy 16 % (eV)", F, "eV", "16th percentile of the exciton energy (Monte Carlo; empty without)"),
    ("Exciton energy 84 % (eV)", F, "eV", "84th percentile of the exciton energy (Monte Carlo; empty without)"),
    ("Emission wavelength (nm)", F, "nm",
     "vacuum wavelength of the lowest bright exciton, with the band gap as calculated (not shrunk by the "
     "surroundings' screening: one end of the emission bracket)"),
    ("Emission wavelength 16 % (nm)", F, "nm", "16th percentile of the emission wavelength (Monte Carlo)"),
    ("Emission wavelength 84 % (nm)", F, "nm", "84th percentile of the emission wavelength (Monte Carlo)"),
    ("Emission if the gap compensates (nm)", F, "nm",
     "other end of the emission bracket: the quasiparticle gap shrinks with the screening as the binding falls"),
    ("Emission at", S, NO_UNIT,
     "temperature the exciton energy and wavelength are for: the operating temperature when the record gives "
     "the gap's temperature dependence (thermal shift applied), else the calculation's temperature"),
    ("Spectral band", S, NO_UNIT, "named spectral band of the emission (config emission_bands)"),
    ("Binding energy (meV)", F, "meV", "binding energy of the lowest bright exciton (Rytova-Keldysh model)"),
    ("Binding energy 16 % (meV)", F, "meV", "16th percentile of the binding energy (Monte Carlo)"),
    ("Binding energy 84 % (meV)", F, "meV", "84th percentile of the binding energy (Monte Carlo)"),
    ("Binding / kT", F, "1", "binding energy over kT at the temperature of the row"),
    ("Lowest exciton", S, NO_UNIT, "'bright', 'dark' or 'unknown' (no competing valley given)"),
    ("Dark - bright exciton (meV)", F, "meV", "lowest dark minus lowest bright exciton energy: > 0 bright"),
    ("Bright fraction", F, "1", "thermal share of excitons in the bright state at the temperature of the row"),
    ("Direct-indirect band-gap margin (meV)", F, "meV", "indirect minus direct band gap: > 0 direct"),
    ("Score (0-1)", F, "1", "the ranking score; its definition is the 'score definition' row of the settings sheet"),
    ("Probability all criteria met", F, "1", "chance that every criterion holds given the input uncertainties: share of Monte Carlo samples meeting "
     "every criterion (a model estimate; empty without)"),
]

#: results/shortlist_settings.csv: the settings and stamps of the run, one row each.
_SHORTLIST_SETTINGS = [
    ("Setting", S, NO_UNIT, "name of the setting or stamp"),
    ("Value", S, NO_UNIT, "its value in this run"),
    ("Unit", S, NO_UNIT, "unit of the value ('1' a plain number, empty for text)"),
    ("Meaning", S, NO_UNIT, "what the setting does, in words"),
]

#: Columns of the shortlist and its settings sheet, in order.
SHORTLIST_COLUMNS = tuple(c[0] for c in _SHORTLIST)
SHORTLIST_SETTINGS_COLUMNS = tuple(c[0] for c in _SHORTLIST_SETTINGS)

#: Every column with a fixed name.
COLUMNS: dict[str, Column] = _declare(_STAMPS + _ENTRY + _VALLEY + _REJECT + _LONG + _WIDE + _UNCERTAINTY
                                      + _CHANGES + _REFINEMENT + _SHORTLIST + _SHORTLIST_SETTINGS)

#: Percentiles and quantities of the Monte Carlo summary columns ``<quantity>_p<NN>``.
PERCENTILES = (16, 50, 84)
MC_QUANTITIES = {
    "target_binding_ev": "Rytova-Keldysh binding at the target layer count in the ranking environment",
    "target_optical_gap_ev": "optical gap (direct gap - binding) at the target layer count; samples where the binding "
                             "reaches the direct gap give none and are left out",
    "target_emission_nm": "emission wavelength at the target layer count",
    "bulk_binding_ev": "bulk 3D hydrogenic binding (geometric-mean dielectric constant) with the bulk model's own "
                       "error (excitons.model_rel_unc_bulk)",
}

#: Families of columns: regular expression -> (dtype, unit, description with {groups}).
PATTERNS: dict[str, tuple[str, str, str]] = {
    r"edge_(?P<n>\d+)l_ev": (F, "eV", "band edge of the valley at {n} layer(s) (NaN if not given)"),
    r"edge_bulk_ev": (F, "eV", "band edge of the valley in the bulk crystal"),
    r"binding_1l_ev__(?P<env>.+)": (F, "eV", "monolayer Rytova-Keldysh binding in environment {env}"),
    r"optical_gap_1l_ev__(?P<env>.+)": (F, "eV", "monolayer bright exciton energy in environment {env};"
                                                 " empty where the binding reaches the direct gap"),
    r"emission_1l_nm__(?P<env>.+)": (F, "nm", "monolayer emission wavelength in environment {env}"),
    r"emission_nm_p(?P<p>\d+)__(?P<env>.+)": (
        F, "nm", "{p}th percentile (Monte Carlo) of the emission wavelength at the target layer count in "
                 "surroundings {env}"),
    r"(?P<q>target_binding_ev|target_optical_gap_ev|target_emission_nm|bulk_binding_ev)_p(?P<p>\d+)": (
        F, "{unit}", "{p}th percentile (Monte Carlo) of the {text}"),
}


def lookup(name: str) -> Column | None:
    """The declaration of a column (fixed name or family member), or None if undeclared."""
    if name in COLUMNS:
        return COLUMNS[name]
    for pattern, (dtype, unit, text) in PATTERNS.items():
        m = re.fullmatch(pattern, name)
        if m:
            groups = m.groupdict()
            if "q" in groups:
                q = groups["q"]
                groups.update(unit=COLUMNS[q].unit if q in COLUMNS else "eV" if q.endswith("_ev") else "nm",
                              text=MC_QUANTITIES[q])
            return Column(name, dtype, unit.format(**groups), text.format(**groups))
    return None


def units_for(columns) -> dict[str, str]:
    """Unit of every declared column among ``columns``."""
    return {c: col.unit for c in columns if (col := lookup(c)) is not None}


def descriptions_for(columns) -> dict[str, str]:
    """Description of every declared column among ``columns``."""
    return {c: col.description for c in columns if (col := lookup(c)) is not None}


_PANDAS = {"string": "str", "float64": "float64", "int16": "int16", "Int16": "Int16", "int32": "int32",
           "int64": "int64", "bool": "boolean"}

#: Position in _WIDE of the first column after the per-surroundings monolayer columns of screen_wide.
_WIDE_PER_ENV = [c[0] for c in _WIDE].index("rank_environment")


def pandas_dtype(name: str) -> str:
    """pandas dtype of a declared column for typed frames (flags nullable: 'boolean')."""
    col = lookup(name)
    if col is None:
        raise KeyError(f"column {name!r} is not declared in lamellume.tables")
    return _PANDAS[col.dtype]


#: The output tables and their columns in order (families as patterns), for the documentation.
TABLES: dict[str, tuple[str, list[str]]] = {
    "results/tables/entries.parquet": (
        "one row per screened compound: the normalised record",
        ["entry_id", "source_file", "input_hash", "formula", "provenance", "energy_reference", "structure_file",
         "structure_hash", "source_hashes", "dielectric_frame", "normal_x", "normal_y", "normal_z", "normal_source",
         *[f"eps_inf_{c}" for c in _TENSOR], *[f"eps_static_{c}" for c in _TENSOR], "eps_rel_unc",
         "spacing_angstrom", "spacing_source", "lattice_angstrom", "lattice_source", "is_layered_structure",
         "vdw_gap_angstrom", "r0_given_angstrom", "r0_source", "r0_rel_unc", "scissor_ev", "scissor_unc_ev",
         "edge_eps_top", "edge_eps_bottom", "edge_method", "gap_t_form", "gap_t_alpha_ev_per_k", "gap_t_beta_k",
         "gap_t_coupling", "gap_t_phonon_ev", "gap_t_reference_k",
         "warnings", "physics_hash", "code_version", "config_hash"]),
    "results/tables/valleys.parquet": (
        "one row per valley of a screened compound",
        ["entry_id", "valley_index", "input_hash", "label", "band", "edge_1l_ev", "edge_bulk_ev",
         "inv_mass_xx", "inv_mass_xy", "inv_mass_yy", "mass_perp_me", "mass_source", "mass_fit_rms_ev",
         "mass_nonparabolic", "mass_rel_unc", "edge_unc_ev", "degeneracy", "spin_split_ev", "edge_spin",
         "physics_hash", "code_version", "config_hash"]),
    "results/tables/rejects.parquet": (
        "one row per problem of a rejected record (also rejects.csv)",
        ["entry_id", "source_file", "field", "reason", "stage", "input_hash", "physics_hash", "code_version"]),
    "results/tables/screen_long.parquet": (
        "one row per compound, layer count and surroundings (bulk: one row)",
        ["entry_id", *[c[0] for c in _LONG], "input_hash", "physics_hash",
                                     "code_version", "config_hash"]),
    "results/tables/screen_wide.parquet": (
        "one row per compound, ranked; the Monte Carlo summary joined",
        ["entry_id", "formula", "input_hash", *[c[0] for c in _WIDE[:_WIDE_PER_ENV]], "warnings",
         "binding_1l_ev__<env>", "optical_gap_1l_ev__<env>", "emission_1l_nm__<env>",
         *[c[0] for c in _WIDE[_WIDE_PER_ENV:-1]],
         *[f"{q}_p{p}" for q in MC_QUANTITIES for p in PERCENTILES], *[c[0] for c in _UNCERTAINTY],
         "emission_nm_p16__<env>", "emission_nm_p84__<env>", "rank", "physics_hash", "code_version", "config_hash"]),
    "results/tables/attribution.parquet": (
        "one row per borderline compound, attributed output and input group (variance-based attribution)",
        ["entry_id", "input_hash", "physics_hash", "output", "input_group", "input_kind", "valley_index",
         "p_meets_all", "p_on_shortlist", "shortlist_cut", "mean", "variance", "share_first", "share_first_se", "share_total", "share_total_se",
         "share_halved", "share_halved_se", "n_base", "seed"]),
    "results/tables/refinement.parquet": (
        "the campaign's refinement list: which input to recompute first (also results/refinement.csv)",
        ["rank", "entry_id", "input_group", "input_kind", "valley_index", "recompute", "verdict", "p_meets_all",
         "p_on_shortlist", "share_first", "share_total", "share_halved", "expected_effect", "mostly_through", "advice"]),
    "results/tables/changes.parquet": (
        "one row per compound that changed since the previous run",
        ["entry_id", *[c[0] for c in _CHANGES]]),
    "results/shortlist.csv": (
        "the shortlist for experimental teams: the ranked list's first ranking.shortlist_size compounds "
        "(candidates first); column names never change with the settings",
        list(SHORTLIST_COLUMNS)),
    "results/shortlist_settings.csv": (
        "the settings and stamps of the run that wrote the shortlist, one row each (written beside the "
        "manifest): caution, campaign, date, layer count, surroundings, temperature, criteria, score "
        "definition, config hash, code version",
        list(SHORTLIST_SETTINGS_COLUMNS)),
}


def column_docs() -> str:
    """Markdown documentation of every output table's columns (docs/columns.md)."""
    lines = ["# Output columns", "",
             "Generated from `workflow/lamellume/tables.py` by `python -m lamellume.tables`; do not edit.",
             "Units: `1` dimensionless, `-` text, identifier or flag. `<env>`: one column per configured",
             "surroundings; `edge_<N>l_ev`: one column per layer count 1..max_layers.", ""]
    for table, (what, columns) in TABLES.items():
        lines += [f"## `{table}`", "", what + ".", "", "| column | type | unit | description |",
                  "|---|---|---|---|"]
        for name in columns:
            col = lookup(name.replace("<env>", "ENV").replace("edge_1l_ev", "edge_1l_ev"))
            shown = name if name != "edge_1l_ev" else "edge_<N>l_ev"
            lines.append(f"| `{shown}` | {col.dtype} | {col.unit} | {col.description.replace('ENV', '<env>')} |")
        lines.append("")
    lines += ["## Values of text columns with a fixed list", "",
              "`Int16` columns hold a count or are empty; no number stands for a state."]
    for name, values in VOCABULARIES.items():
        lines += ["", f"`{name}`:", "", "| value | meaning |", "|---|---|"]
        lines += [f"| `{value}` | {meaning} |" for value, meaning in values.items()]
    lines.append("")
    return "\n".join(lines)


if __name__ == "__main__":
    print(column_docs(), end="")
