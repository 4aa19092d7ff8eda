"""Physical and physiological constants, each with its source.

These are not settings: they are versioned with the code. Site-tunable values (the Hüfner
factor a site prefers, the assumed arterial-venous content difference) are parameters of the
functions that use them and settings of the service, with these as defaults.
"""

from __future__ import annotations

# --- Units ----------------------------------------------------------------------------------
# UCUM defines m[Hg] = 133.3220 kPa, so 1 mm[Hg] = 0.1333220 kPa (UCUM essence, "m[Hg]").
# The conventional mmHg (133.322387415 Pa) differs by 3 ppm; UCUM is what FHIR payloads use.
KPA_PER_MMHG = 0.1333220
# UCUM: m[H2O] = 9.80665 kPa, so 1 cm[H2O] = 0.0980665 kPa.
KPA_PER_CMH2O = 0.0980665

# --- Atmosphere -----------------------------------------------------------------------------
# ISO 2533:1975 / ICAO standard atmosphere, sea-level values and troposphere lapse rate.
ISA_SEA_LEVEL_PRESSURE_PA = 101_325.0
ISA_SEA_LEVEL_TEMPERATURE_K = 288.15
ISA_LAPSE_RATE_K_PER_M = 0.0065
ISA_TROPOPAUSE_GEOPOTENTIAL_M = 11_000.0
STANDARD_GRAVITY_M_S2 = 9.80665
DRY_AIR_GAS_CONSTANT_J_KG_K = 287.05287  # ISO 2533 specific gas constant of dry air
EARTH_RADIUS_M = 6_356_766.0  # ISO 2533 nominal radius for geopotential altitude
PA_PER_MMHG = KPA_PER_MMHG * 1000.0

SEA_LEVEL_PRESSURE_MMHG = 760.0  # standard atmosphere, common practice in clinical equations

# West JB, J Appl Physiol 1996;81:1850: PB (mmHg) = exp(a - b h - c h²), h in km.
WEST_1996_A = 6.63268
WEST_1996_B_PER_KM = 0.1112
WEST_1996_C_PER_KM2 = 0.00149

# --- Gas exchange ---------------------------------------------------------------------------
ROOM_AIR_FIO2 = 0.21  # clinical convention; dry air is 0.2095 (ISO 2533 composition)
# An FiO2 counts as supplemental oxygen when it exceeds room air by more than half a percentage
# point: FiO2 is charted in whole percent, so 21 % is air and 22 % is oxygen (common practice).
ROOM_AIR_FIO2_TOLERANCE = 0.005
# From this FiO2 the shunt equation measures true shunt rather than venous admixture (low-V/Q
# units are then fully oxygenated); 0.99 rather than 1.0 allows for charting as 99 %
# (Benatar, Hewlett & Nunn, Br J Anaesth 1973;45:711: the admixture at FiO2 1.0 is true shunt).
TRUE_SHUNT_MIN_FIO2 = 0.99
# On this FiO2 or more the end-capillary blood is fully saturated (PAO2 above ~600 mmHg), so
# the dissolved oxygen alone bounds the shunt from below (oxygen_content).
DISSOLVED_SHUNT_BOUND_MIN_FIO2 = 0.9
DEFAULT_RESPIRATORY_QUOTIENT = 0.8  # textbook convention (West, Respiratory Physiology)
WATER_VAPOUR_TEXTBOOK_MMHG = 47.0  # West, Respiratory Physiology: PH2O at 37 °C
NORMAL_BODY_TEMPERATURE_CEL = 37.0

# --- Oxygen content -------------------------------------------------------------------------
HUFNER_CONVENTIONAL_ML_PER_G = 1.34  # common practice; 1.39 theoretical, 1.368 measured
O2_SOLUBILITY_ML_DL_PER_MMHG = 0.003  # dissolved O2, mL/dL per mmHg at 37 °C (common practice)
ASSUMED_AV_DIFFERENCE_ML_DL = 5.0  # normal resting a-v content difference (common practice)
# The range an assumed a-v content difference is varied over, to show what it does to a shunt:
# from the 3.5 mL/dL of the "estimated shunt" equations for the critically ill to a low-output
# 7 mL/dL (common practice). A site may set its own (``Settings.av_difference_range_ml_dl``).
ASSUMED_AV_DIFFERENCE_RANGE_ML_DL = (3.5, 7.0)
# Mixed-venous PO2 taken when a mixed-venous saturation comes without its PO2: its dissolved
# oxygen is 0.12 mL/dL, so the choice barely matters (normal resting value, common practice).
NORMAL_MIXED_VENOUS_PO2_MMHG = 40.0
# Above this arterial PO2 the blood is on the flat part of the curve: a measured SaO2 below
# full saturation there reflects dyshaemoglobin or measurement, not shunt.
FLAT_CURVE_PO2_MMHG = 150.0

# --- Saturation curve -----------------------------------------------------------------------
# Severinghaus JW, J Appl Physiol 1979;46:599, eq. 1: S = 1 / (23400 / (PO2³ + 150 PO2) + 1).
SEVERINGHAUS_A = 23_400.0
SEVERINGHAUS_B = 150.0
# Brown SM et al., Chest 2016;150:307: SpO2 -> PaO2 imputation is valid at SpO2 <= 96 %.
IMPUTATION_MAX_SPO2 = 0.96

# --- Acid-base ------------------------------------------------------------------------------
HENDERSON_CONSTANT = 24.0  # [H+] nmol/L = 24 x PaCO2 mmHg / HCO3 mmol/L (Kassirer & Bleich 1965)
NORMAL_PACO2_MMHG = 40.0
NORMAL_HCO3_MMOL_L = 24.0
