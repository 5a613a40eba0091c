"""Link budget: thermal noise, SNR of direct plus surface path (power sum or co-phased), spectral efficiency.

References
----------
.. [1] E. Björnson, Ö. Özdogan and E. G. Larsson, "Intelligent Reflecting Surface vs. Decode-and-Forward:
   How Large Surfaces Are Needed to Beat Relaying?", IEEE Wireless Commun. Lett., 2020, arXiv:1906.03949
   (SNR with co-phased direct and surface paths, the single-frequency upper bound; noise -174 dBm/Hz +
   10 log10 B + NF).
.. [2] 3GPP TR 36.942, "Evolved Universal Terrestrial Radio Access (E-UTRA); Radio Frequency (RF) system
   scenarios", Annex A.2 (truncated Shannon bound).  The parameter values (alpha = 0.6, SNR_min = -10 dB,
   Thr_max = 4.4 bit/s/Hz) are quoted from memory and were not checked against the TR text; they are overridable.
"""

from __future__ import annotations

import numpy as np

from ._checks import RadioInputError, as_float, scalar_or_array

__all__ = ["noise_power_dbm", "coherent_snr_db", "power_sum_snr_db", "band_average_two_path_power",
           "spectral_efficiency_bps_hz", "linear_to_db", "db_to_linear", "THERMAL_NOISE_DBM_HZ", "SHANNON_DL"]

#: Thermal noise density used by the project [dBm/Hz] (kT0 with T0 = 290 K is -173.975 dBm/Hz).
THERMAL_NOISE_DBM_HZ = -174.0

#: Truncated Shannon parameters of [2], Annex A.2 (downlink): alpha, SNR_min [dB], max [bps/Hz].
SHANNON_DL = {"alpha": 0.6, "snr_min_db": -10.0, "max_bps_hz": 4.4}


def linear_to_db(x):
    """10 log10(x) for power ratios; 0 gives -inf (no path), negative or NaN raises."""
    arr = as_float("linear gain", x, min_value=0.0)
    with np.errstate(divide="ignore"):
        return scalar_or_array(10.0 * np.log10(arr))


def db_to_linear(x_db):
    """10^(x/10) for power ratios; -inf gives 0."""
    arr = as_float("gain_db", x_db)
    return scalar_or_array(10.0 ** (arr / 10.0))


def noise_power_dbm(bandwidth_hz, noise_figure_db):
    r"""Receiver noise power.

    Parameters
    ----------
    bandwidth_hz : float or array_like
        Noise bandwidth [Hz], > 0.
    noise_figure_db : float or array_like
        Receiver noise figure [dB].

    Returns
    -------
    float or ndarray
        Noise power [dBm].

    Notes
    -----
    .. math:: \sigma^2 = -174 + 10\log_{10} B + NF \quad [\mathrm{dBm}]

    The exact kT0B with T0 = 290 K is 0.025 dB lower; the rounded density is the one used in [1].

    References
    ----------
    .. [1] E. Björnson et al., IEEE Wireless Commun. Lett., 2020, arXiv:1906.03949.
    """
    b = as_float("bandwidth_hz", bandwidth_hz, min_value=0.0, strict=True)
    nf = as_float("noise_figure_db", noise_figure_db)
    return scalar_or_array(THERMAL_NOISE_DBM_HZ + 10.0 * np.log10(b) + nf)


def _two_path_inputs(tx_power_dbm, direct_gain_db, surface_gain_db, noise_dbm):
    """Checked float arrays of a two-path SNR's inputs; a gain is finite or -inf (no path), never +inf."""
    p = as_float("tx_power_dbm", tx_power_dbm)
    gd = as_float("direct_gain_db", direct_gain_db)
    gs = as_float("surface_gain_db", surface_gain_db)
    n = as_float("noise_dbm", noise_dbm)
    if np.any(gd == np.inf) or np.any(gs == np.inf):
        raise RadioInputError("gain_db: +inf gain found; a path gain must be finite or -inf (no path)")
    return p, gd, gs, n


def coherent_snr_db(tx_power_dbm, direct_gain_db, surface_gain_db, noise_dbm):
    r"""SNR with the surface path co-phased with the direct path (amplitudes add).

    Parameters
    ----------
    tx_power_dbm : float or array_like
        Transmit power [dBm].
    direct_gain_db : float or array_like
        Direct-path gain INCLUDING antenna gains [dB] (e.g. G_tx + G_rx - PL); -inf for no direct path.
    surface_gain_db : float or array_like
        Surface-path gain INCLUDING antenna gains [dB]; -inf for no surface path.
    noise_dbm : float or array_like
        Noise power [dBm] (:func:`noise_power_dbm`).

    Returns
    -------
    float or ndarray
        SNR [dB]; -inf when both gains are -inf.

    Notes
    -----
    .. math:: \mathrm{SNR} = P\left(\sqrt{\beta_{d}} + \sqrt{\beta_{s}}\right)^2 / \sigma^2

    [1], Eq. (12) of its simulation code (the surface phases also align the sum with the direct path).

    References
    ----------
    .. [1] E. Björnson et al., IEEE Wireless Commun. Lett., 2020, arXiv:1906.03949.
    """
    p, gd, gs, n = _two_path_inputs(tx_power_dbm, direct_gain_db, surface_gain_db, noise_dbm)
    amp = 10.0 ** (gd / 20.0) + 10.0 ** (gs / 20.0)  # [1]: sqrt(beta_d) + sqrt(beta_s)
    with np.errstate(divide="ignore"):
        return scalar_or_array(p + 20.0 * np.log10(amp) - n)


def power_sum_snr_db(tx_power_dbm, direct_gain_db, surface_gain_db, noise_dbm):
    r"""SNR with the surface and direct paths adding as powers (the channel average over a wide band).

    Parameters
    ----------
    tx_power_dbm : float or array_like
        Transmit power [dBm].
    direct_gain_db : float or array_like
        Direct-path gain INCLUDING antenna gains [dB]; -inf for no direct path.
    surface_gain_db : float or array_like
        Surface-path gain INCLUDING antenna gains [dB]; -inf for no surface path.
    noise_dbm : float or array_like
        Noise power [dBm] (:func:`noise_power_dbm`).

    Returns
    -------
    float or ndarray
        SNR [dB]; -inf when both gains are -inf.

    Notes
    -----
    .. math:: \mathrm{SNR} = P\,(\beta_{d} + \beta_{s}) / \sigma^2

    The surface route is longer than the direct one by Delta d, a delay tau = Delta d / c.  Across a band of
    width B the relative phase of the two paths turns by 2 pi B tau, and the band average of the received power
    is the power sum plus a cross term scaled by sinc(B tau) (:func:`band_average_two_path_power`).  When
    Delta d exceeds c / B (1.5 m at 200 MHz) the cross term is at most 2 |a b| / (pi B tau), and it vanishes
    when B tau is a whole number: the power sum is the channel average.  The co-phased amplitude sum of [1]
    (:func:`coherent_snr_db`) holds on one frequency and a deterministic direct path; it is the upper bound.

    References
    ----------
    .. [1] E. Björnson, Ö. Özdogan and E. G. Larsson, "Intelligent Reflecting Surface vs. Decode-and-Forward:
       How Large Surfaces Are Needed to Beat Relaying?", IEEE Wireless Commun. Lett., 2020, arXiv:1906.03949.
    """
    p, gd, gs, n = _two_path_inputs(tx_power_dbm, direct_gain_db, surface_gain_db, noise_dbm)
    top = np.maximum(gd, gs)
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = 10.0 ** ((gd - top) / 10.0) + 10.0 ** ((gs - top) / 10.0)   # beta_d + beta_s, scaled by the larger
        snr = p + top + 10.0 * np.log10(rel) - n
    return scalar_or_array(np.where(np.isneginf(top), -np.inf, snr))


def band_average_two_path_power(a, b, delay_s, bandwidth_hz, phase_rad=0.0):
    r"""Band-averaged power of two paths with a relative delay: (1/B) int |a e^{j phi} + b e^{j 2 pi f tau}|^2 df.

    Parameters
    ----------
    a, b : complex or array_like
        Complex amplitudes of the two paths at the band centre (linear, e.g. sqrt of a power gain).
    delay_s : float or array_like
        Delay tau of path b relative to path a [s] (any sign).
    bandwidth_hz : float or array_like
        Band width B [Hz], > 0.
    phase_rad : float or array_like, default 0
        Extra phase phi of path a at the band centre [rad] (e.g. a phase setting of the surface).

    Returns
    -------
    float or ndarray
        Average power [same unit as |a|^2].

    Notes
    -----
    With f the offset from the band centre, f in [-B/2, B/2] (mathematics):

    .. math::
        \frac{1}{B}\int_{-B/2}^{B/2} \left|a\,e^{j\varphi} + b\,e^{j 2\pi f\tau}\right|^2 df
        = |a|^2 + |b|^2 + 2\,\mathrm{Re}\left(a\,\bar b\, e^{j\varphi}\right)\,\mathrm{sinc}(B\tau)

    with the normalised sinc(x) = sin(pi x) / (pi x) of :func:`numpy.sinc`.  The cross term vanishes when
    B tau is a whole number and is below 2 |a b| / (pi B tau) in general, which is why the power sum
    (:func:`power_sum_snr_db`) is the channel average once the path difference exceeds c / B.  For real a
    and b the sign of phi does not matter.

    References
    ----------
    .. [1] E. Björnson et al., IEEE Wireless Commun. Lett., 2020, arXiv:1906.03949 (co-phased sum as the
       single-frequency case, B tau -> 0).
    """
    aa = np.asarray(a, dtype=complex)
    bb = np.asarray(b, dtype=complex)
    if np.isnan(aa).any() or np.isnan(bb).any():
        raise RadioInputError("a, b: expected numbers, found NaN; drop or fill those rows first")
    tau = as_float("delay_s", delay_s)
    bw = as_float("bandwidth_hz", bandwidth_hz, min_value=0.0, strict=True)
    phi = as_float("phase_rad", phase_rad)
    cross = 2.0 * np.real(aa * np.conj(bb) * np.exp(1j * phi)) * np.sinc(bw * tau)   # np.sinc: sin(pi x)/(pi x)
    return scalar_or_array(np.abs(aa) ** 2 + np.abs(bb) ** 2 + cross)


def spectral_efficiency_bps_hz(snr_db, alpha=SHANNON_DL["alpha"], snr_min_db=SHANNON_DL["snr_min_db"],
                               max_bps_hz=SHANNON_DL["max_bps_hz"]):
    r"""Truncated (attenuated) Shannon bound: spectral efficiency from SNR.

    Parameters
    ----------
    snr_db : float or array_like
        SNR [dB]; -inf allowed.
    alpha : float, default 0.6
        Attenuation factor (implementation losses) of [2], Table A.2-1 (downlink).
    snr_min_db : float, default -10
        SNR below which the throughput is 0 [dB].
    max_bps_hz : float, default 4.4
        Maximum spectral efficiency [bit/s/Hz] (highest modulation and coding).

    Returns
    -------
    float or ndarray
        Spectral efficiency [bit/s/Hz].

    Notes
    -----
    .. math::
        \mathrm{Thr} = \begin{cases} 0 & \mathrm{SNR} < \mathrm{SNR}_{min}\\
        \alpha \log_2(1 + \mathrm{SNR}) & \text{while below } \mathrm{Thr}_{max}\\
        \mathrm{Thr}_{max} & \text{above} \end{cases}

    With the defaults the cap is reached at SNR_max = 22.05 dB.

    References
    ----------
    .. [2] 3GPP TR 36.942, Annex A.2, Table A.2-1.
    """
    snr = as_float("snr_db", snr_db)
    if alpha <= 0 or max_bps_hz <= 0:
        raise RadioInputError(f"alpha and max_bps_hz: expected positive values, got {alpha}, {max_bps_hz}")
    se = alpha * np.log2(1.0 + 10.0 ** (snr / 10.0))  # [2], Annex A.2
    return scalar_or_array(np.where(snr < snr_min_db, 0.0, np.minimum(se, max_bps_hz)))
