"""Radio model: pure, vectorised physics on numpy arrays.

Path loss (free space, 3GPP TR 38.901 UMi/UMa), gaseous absorption (ITU-R P.676), base station antenna
patterns (TR 38.901 Table 7.3-1), reflecting-surface gain in the far and near field, exact near-field
references (Björnson & Sanguinetti 2020), noise, coherent SNR and spectral efficiency.  No file IO, no
tables: numbers in, numbers out.  Units are in the parameter names; azimuths are degrees clockwise from north.
"""

from ._checks import SPEED_OF_LIGHT_M_S, RadioInputError, RadioValidityWarning
from .antenna import (
    ELEMENT_GAIN_DBI,
    array_size_for_gain,
    bs_beam_gain_dbi,
    bs_gain_toward_dbi,
    local_angles_deg,
    sector_gain_dbi,
)
from .atmosphere import gaseous_attenuation_db, gaseous_attenuation_db_per_km, water_vapour_pressure_hpa
from .elements import element_count, element_pitch_m
from .exposure import density_from_isotropic_power_w_m2, icnirp_reference_level_w_m2, power_density_w_m2
from .fading import (
    SHADOW_FADING_SIGMA_DB,
    combined_level_quantile_db,
    fade_margin_db,
    hop_sigma_db,
    shadow_fading_sigma_db,
)
from .link import (
    SHANNON_DL,
    THERMAL_NOISE_DBM_HZ,
    band_average_two_path_power,
    coherent_snr_db,
    db_to_linear,
    linear_to_db,
    noise_power_dbm,
    power_sum_snr_db,
    spectral_efficiency_bps_hz,
)
from .nearfield import (
    element_gain_exact,
    irs_gain_exact,
    mirror_limit_gain,
    n_max_far_field,
    planar_array_gain,
    planar_array_gain_broadside,
)
from .pathloss import (
    MODELS,
    breakpoint_distance_m,
    direct_model_fit,
    direct_path_loss_db,
    free_space_path_loss_db,
    fresnel_radius_m,
    los_excess_db,
    los_probability_uma,
    los_probability_umi,
    uma_los_db,
    uma_nlos_db,
    umi_street_canyon_los_db,
    umi_street_canyon_nlos_db,
)
from .surface import (
    DEFAULT_ELEMENT_Q,
    element_sum_gain,
    element_sum_gain_profile,
    far_field_gain,
    fraunhofer_distance_m,
    nearest_beam,
    quantisation_efficiency,
    surface_gain,
    tile_counts,
)

__all__ = [
    "SPEED_OF_LIGHT_M_S", "RadioInputError", "RadioValidityWarning", "element_count", "element_pitch_m",
    "bs_gain_toward_dbi", "local_angles_deg", "sector_gain_dbi",
    "ELEMENT_GAIN_DBI", "array_size_for_gain", "bs_beam_gain_dbi",
    "density_from_isotropic_power_w_m2", "icnirp_reference_level_w_m2", "power_density_w_m2",
    "SHADOW_FADING_SIGMA_DB", "combined_level_quantile_db", "fade_margin_db", "hop_sigma_db",
    "shadow_fading_sigma_db",
    "gaseous_attenuation_db", "gaseous_attenuation_db_per_km", "water_vapour_pressure_hpa",
    "SHANNON_DL", "THERMAL_NOISE_DBM_HZ", "coherent_snr_db", "db_to_linear", "linear_to_db",
    "noise_power_dbm", "spectral_efficiency_bps_hz", "band_average_two_path_power", "power_sum_snr_db",
    "element_gain_exact", "irs_gain_exact", "mirror_limit_gain", "n_max_far_field",
    "planar_array_gain", "planar_array_gain_broadside",
    "MODELS", "breakpoint_distance_m", "direct_path_loss_db", "free_space_path_loss_db",
    "direct_model_fit", "fresnel_radius_m", "los_excess_db",
    "los_probability_uma", "los_probability_umi", "uma_los_db", "uma_nlos_db",
    "umi_street_canyon_los_db", "umi_street_canyon_nlos_db",
    "element_sum_gain", "far_field_gain", "fraunhofer_distance_m", "quantisation_efficiency",
    "surface_gain", "tile_counts", "DEFAULT_ELEMENT_Q", "element_sum_gain_profile", "nearest_beam",
]
