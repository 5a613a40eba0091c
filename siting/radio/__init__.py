"""Radio model: pure, vectorised physics on numpy arrays.

Path loss (free space, 3GPP TR 38.901 UMi/UMa), gaseous absorption (ITU-R P.676), base station antenna
patterns (TR 38.901 Table 7.3-1), reflecting-surface gain in the far and near field, exact near-field
references (Björnson & Sanguinetti 2020), noise, coherent SNR and spectral efficiency.  No file IO, no
tables: numbers in, numbers out.  Units are in the parameter names; azimuths are degrees clockwise from north.
"""

from ._checks import SPEED_OF_LIGHT_M_S, RadioInputError, RadioValidityWarning
from .antenna import bs_gain_toward_dbi, local_angles_deg, sector_gain_dbi
from .atmosphere import gaseous_attenuation_db, gaseous_attenuation_db_per_km, water_vapour_pressure_hpa
from .link import (SHANNON_DL, THERMAL_NOISE_DBM_HZ, coherent_snr_db, db_to_linear, linear_to_db,
                   noise_power_dbm, spectral_efficiency_bps_hz)
from .nearfield import (element_gain_exact, irs_gain_exact, mirror_limit_gain, n_max_far_field,
                        planar_array_gain, planar_array_gain_broadside)
from .pathloss import (MODELS, breakpoint_distance_m, direct_path_loss_db, free_space_path_loss_db,
                       los_probability_uma, los_probability_umi, uma_los_db, uma_nlos_db,
                       umi_street_canyon_los_db, umi_street_canyon_nlos_db)
from .surface import (DEFAULT_ELEMENT_Q, element_sum_gain, element_sum_gain_profile, far_field_gain,
                      fraunhofer_distance_m, nearest_beam, quantisation_efficiency, surface_gain, tile_counts)

__all__ = [
    "SPEED_OF_LIGHT_M_S", "RadioInputError", "RadioValidityWarning",
    "bs_gain_toward_dbi", "local_angles_deg", "sector_gain_dbi",
    "gaseous_attenuation_db", "gaseous_attenuation_db_per_km", "water_vapour_pressure_hpa",
    "SHANNON_DL", "THERMAL_NOISE_DBM_HZ", "coherent_snr_db", "db_to_linear", "linear_to_db",
    "noise_power_dbm", "spectral_efficiency_bps_hz",
    "element_gain_exact", "irs_gain_exact", "mirror_limit_gain", "n_max_far_field",
    "planar_array_gain", "planar_array_gain_broadside",
    "MODELS", "breakpoint_distance_m", "direct_path_loss_db", "free_space_path_loss_db",
    "los_probability_uma", "los_probability_umi", "uma_los_db", "uma_nlos_db",
    "umi_street_canyon_los_db", "umi_street_canyon_nlos_db",
    "element_sum_gain", "far_field_gain", "fraunhofer_distance_m", "quantisation_efficiency",
    "surface_gain", "tile_counts", "DEFAULT_ELEMENT_Q", "element_sum_gain_profile", "nearest_beam",
]
