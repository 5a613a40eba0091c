"""Link gains: join the visibility pair tables and the radio model into the coverage relation.

Stage contract (the tables of :mod:`siting.tables`): in go the ``base_stations``, ``sites``, ``sizes`` and
``users`` tables and the compiled :class:`~siting.visibility.Obstacles`; out come

* ``direct``: every user's best direct SNR without any surface and its serving base station;
* ``options``: one row per (site, panel size) whose panel fits on the wall;
* ``coverage``: sparse (option, user) -> SNR with that surface steered to the user, coherently added to the
  user's direct path from the same base station, best base station chosen; rows are kept down to
  ``keep_margin_db`` below the target so the report can show near misses; the optimiser uses only rows at or
  above the target;
* the LOS pair tables ``bs_site`` and ``site_user`` (for the links layer and the graph statistics).

Beam assumption at the base station (stated in the README): the configured maximum gain is the gain of a
steerable array whose envelope is the 3GPP TR 38.901 Table 7.3-1 element pattern around the sector's boresight;
the beam can be pointed anywhere inside the sector, so a target at angle (phi, theta) from boresight sees
``max_gain_dbi + A(phi, theta)``.  A surface-served user is reached with the beam on the surface; its direct
contribution is counted with the envelope gain toward the user, as in the usual coherent model
SNR = P (sqrt(beta_direct) + sqrt(beta_surface))^2 / sigma^2.  That is optimistic for the direct part only,
which matters only for users whose direct path is already near the target.

Pruning order (the heavy part is site -> user): base station -> site LOS first; only sites that see a base
station get site -> user links; users already covered directly get none unless ``serve_covered_users``.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from . import radio
from .tables import Points, check
from .visibility import Obstacles, visible_pairs

if TYPE_CHECKING:
    from .job import Job


@dataclass(frozen=True)
class RadioParams:
    """Physical and planning parameters of the gain stage (units in the names).

    The defaults are the planning model; :meth:`upper_bound` gives the ideal model every planning choice is
    measured against (coherent combining, per-user focusing, narrowband, projected-aperture cells, free-space
    hops, bare-ray line of sight, the best station beam toward every user, no shadow fading).
    """

    frequency_hz: float = 28e9
    bandwidth_hz: float = 400e6
    noise_figure_db: float = 7.0
    user_gain_dbi: float = 0.0
    direct_model: str = "umi"
    planning_margin_db: float = 0.0
    gaseous_absorption: bool = True
    snr_target_db: float = 5.0
    bs_range_m: float = 400.0
    surface_range_m: float = 150.0
    serve_covered_users: bool = False
    reflection_efficiency: float = 0.8
    phase_bits: int = 2
    steer_limit_deg: float = 60.0
    keep_margin_db: float = 10.0
    #: 'power': direct and surface powers add (channel average); 'coherent': amplitudes add where the direct
    #: path is LOS (upper bound)
    combining: str = "power"
    #: 'beams': finite set of far-field beams; 'focus': ideal per-user focusing (upper bound)
    control: str = "beams"
    beam_oversampling: int = 2
    #: phase-only elements: gain averaged over the channel (beam squint); False: narrowband (upper bound)
    squint: bool = True
    #: unit-cell power pattern exponent q, (cos theta)^q on each hop
    element_q: float = radio.DEFAULT_ELEMENT_Q
    #: measured reflection efficiency against incidence angle: ((angles_deg...), (efficiencies...)) or None
    efficiency_curve: tuple | None = None
    #: 'direct': each LOS surface hop takes the direct model's LOS law; 'free_space': free space
    surface_hop_model: str = "direct"
    #: 'one_beam': the station beam is aimed at the surface; 'envelope': best beam toward each user (upper bound)
    station_beam: str = "one_beam"
    #: share of the first Fresnel zone radius a surface hop must keep clear (0: bare ray)
    fresnel_clearance: float = 0.6
    #: probability with which a covered user reaches the target under log-normal shadow fading
    coverage_probability: float = 0.9
    shadow_fading: bool = True
    #: facade (home) terminals see surfaces within this angle of their window normal
    home_steer_limit_deg: float = 90.0

    @classmethod
    def from_job(cls, job: Job) -> RadioParams:
        """The gain-stage parameters of a validated :class:`~siting.job.Job` (``[radio]`` and ``[surfaces]``)."""
        r, s = job.radio, job.surfaces
        curve = None
        if s.efficiency_angles_deg:
            curve = (tuple(s.efficiency_angles_deg), tuple(s.efficiency_values))
        return cls(
            frequency_hz=r.frequency_ghz * 1e9,
            bandwidth_hz=r.bandwidth_mhz * 1e6,
            noise_figure_db=r.noise_figure_db,
            user_gain_dbi=r.user_gain_dbi,
            direct_model=r.direct_model,
            planning_margin_db=r.planning_margin_db,
            gaseous_absorption=r.gaseous_absorption,
            snr_target_db=r.snr_target_db,
            bs_range_m=r.bs_range_m,
            surface_range_m=r.surface_range_m,
            serve_covered_users=r.serve_covered_users,
            reflection_efficiency=s.reflection_efficiency,
            phase_bits=s.phase_bits,
            steer_limit_deg=s.steer_limit_deg,
            combining=r.combining,
            control=s.control,
            beam_oversampling=s.beam_oversampling,
            squint=s.squint,
            element_q=s.element_q,
            efficiency_curve=curve,
            surface_hop_model=r.surface_hop_model,
            station_beam=r.station_beam,
            fresnel_clearance=r.fresnel_clearance,
            coverage_probability=r.coverage_probability,
            shadow_fading=r.shadow_fading,
        )

    def upper_bound(self) -> RadioParams:
        """The same job under the ideal model (each planning choice replaced by its optimistic limit)."""
        return replace(self, combining="coherent", control="focus", squint=False, element_q=1.0,
                       efficiency_curve=None, surface_hop_model="free_space", station_beam="envelope",
                       fresnel_clearance=0.0, shadow_fading=False)

    @property
    def noise_dbm(self) -> float:
        return float(radio.noise_power_dbm(self.bandwidth_hz, self.noise_figure_db))

    @property
    def wavelength_m(self) -> float:
        return radio.SPEED_OF_LIGHT_M_S / self.frequency_hz

    @property
    def gas_db_per_m(self) -> float:
        if not self.gaseous_absorption:
            return 0.0
        return float(radio.gaseous_attenuation_db_per_km(self.frequency_hz)) / 1000.0

    def fade_sigma_db(self, los) -> np.ndarray:
        """Shadow-fading standard deviation [dB] of direct paths by LOS class (0 without fading)."""
        los = np.asarray(los, bool)
        if not self.shadow_fading:
            return np.zeros(los.shape)
        return np.where(los, radio.shadow_fading_sigma_db(self.direct_model, True),
                        radio.shadow_fading_sigma_db(self.direct_model, False))

    def fade_margin_db(self, los) -> np.ndarray:
        """Margin [dB] a single path with the given LOS class needs to reach a level with the coverage probability."""
        return np.asarray(radio.fade_margin_db(self.fade_sigma_db(los), self.coverage_probability), float)


@dataclass
class GainResult:
    direct: pd.DataFrame
    options: pd.DataFrame
    coverage: pd.DataFrame
    bs_site: pd.DataFrame
    site_user: pd.DataFrame
    bs_user: pd.DataFrame


def make_options(sites: pd.DataFrame, sizes: pd.DataFrame) -> pd.DataFrame:
    """Every (site, size) whose panel width fits the free wall length at the site, in (site, size) order."""
    check(sites, "sites", "candidates")
    check(sizes, "sizes", "job")
    site_idx = np.repeat(np.arange(len(sites)), len(sizes))
    size_idx = np.tile(np.arange(len(sizes)), len(sites))
    fits = sizes["width_m"].to_numpy(float)[size_idx] <= sites["wall_free_m"].to_numpy(float)[site_idx] + 1e-9
    site_idx, size_idx = site_idx[fits], size_idx[fits]
    cost = (sizes["cost"].to_numpy(float) + sizes["install_cost"].to_numpy(float))[size_idx]
    return pd.DataFrame({
        "option_id": np.arange(len(site_idx), dtype=np.int64),
        "site_id": sites["site_id"].to_numpy(np.int64)[site_idx],
        "size_id": sizes["size_id"].to_numpy(object)[size_idx],
        "cost": cost,
        "size_idx": size_idx.astype(np.int64),
    })


def _bs_gain(bs: pd.DataFrame, bs_idx: np.ndarray, tx: np.ndarray, ty: np.ndarray, tz: np.ndarray) -> np.ndarray:
    """Base-station antenna gain [dBi] from station ``bs_idx`` toward points (tx, ty, tz)."""
    return radio.bs_gain_toward_dbi(
        tx - bs["x"].to_numpy(float)[bs_idx],
        ty - bs["y"].to_numpy(float)[bs_idx],
        tz - bs["z_m"].to_numpy(float)[bs_idx],
        bs["azimuth_deg"].to_numpy(float)[bs_idx],
        bs["downtilt_deg"].to_numpy(float)[bs_idx],
        bs["max_gain_dbi"].to_numpy(float)[bs_idx],
        bs["pattern"].to_numpy(object)[bs_idx] == "omni",
    )


def direct_links(obstacles: Obstacles, bs: pd.DataFrame, users: pd.DataFrame, p: RadioParams,
                 user_index: np.ndarray | None = None) -> pd.DataFrame:
    """Direct received power of every (base station, user) pair in range.

    Returns the ``bs_user`` pair table (columns of the 'pairs' contract with a = base station row, b = user row)
    plus ``rx_dbm``: received power without any surface.  ``user_index`` restricts the users (a tile).
    """
    pairs = visible_pairs(obstacles, Points.from_table(bs), Points.from_table(users), p.bs_range_m,
                          steer_limit_deg=90.0, b_index=user_index)
    a, b = pairs["a"].to_numpy(), pairs["b"].to_numpy()
    ux, uy, uz = (users[c].to_numpy(float)[b] for c in ("x", "y", "z_m"))
    loss = radio.direct_path_loss_db(p.direct_model, pairs["los"].to_numpy(bool), pairs["d2d_m"].to_numpy(float),
                                     bs["z_m"].to_numpy(float)[a], uz, p.frequency_hz)
    pairs["rx_dbm"] = (bs["tx_power_dbm"].to_numpy(float)[a] + _bs_gain(bs, a, ux, uy, uz) + p.user_gain_dbi
                       - loss - p.gas_db_per_m * pairs["distance_m"].to_numpy(float) - p.planning_margin_db)
    return pairs


def best_direct(bs_user: pd.DataFrame, n_users: int, p: RadioParams) -> pd.DataFrame:
    """Every user's best direct SNR and serving base station (the 'direct' contract) from ``bs_user``.

    ``snr_db`` is the planning SNR: the level reached with ``p.coverage_probability`` under log-normal shadow
    fading of the path's LOS class (the median less the fade margin); ``snr_median_db`` is the median.
    """
    margin = p.fade_margin_db(bs_user["los"].to_numpy(bool)) if len(bs_user) else np.zeros(0)
    planning = bs_user["rx_dbm"].to_numpy(float) - margin
    order = np.lexsort((-planning, bs_user["b"].to_numpy()))
    best = order[np.r_[True, bs_user["b"].to_numpy()[order][1:] != bs_user["b"].to_numpy()[order][:-1]]] \
        if len(order) else order
    snr = np.full(n_users, -np.inf)
    median = np.full(n_users, -np.inf)
    bs_idx = np.full(n_users, -1, np.int64)
    los = np.zeros(n_users, bool)
    ub = bs_user["b"].to_numpy()[best]
    snr[ub] = planning[best] - p.noise_dbm
    median[ub] = bs_user["rx_dbm"].to_numpy(float)[best] - p.noise_dbm
    bs_idx[ub] = bs_user["a"].to_numpy()[best]
    los[ub] = bs_user["los"].to_numpy(bool)[best]
    return pd.DataFrame({"user_id": np.arange(n_users, dtype=np.int64), "snr_db": snr, "bs_idx": bs_idx,
                         "los": los, "covered": snr >= p.snr_target_db, "snr_median_db": median})


def surface_links(obstacles: Obstacles, bs: pd.DataFrame, sites: pd.DataFrame, sizes: pd.DataFrame,
                  users: pd.DataFrame, options: pd.DataFrame, bs_user: pd.DataFrame, direct: pd.DataFrame,
                  p: RadioParams, site_index: np.ndarray | None = None, user_index: np.ndarray | None = None,
                  detail: bool = False):
    """Coverage rows of the options at ``site_index`` (all sites when None) and their LOS pair tables.

    ``user_index`` narrows the users considered (a tile passes those within reach of its spots); ``detail``
    adds the surface-path columns of :func:`_surface_coverage`.
    Returns ``(coverage, bs_site, site_user)``.
    """
    # 1. base station -> site, LOS only, incidence inside the steering limit.
    clear = dict(clearance_fraction=p.fresnel_clearance, wavelength_m=p.wavelength_m)
    bs_site = visible_pairs(obstacles, Points.from_table(bs), Points.from_table(sites), p.bs_range_m,
                            steer_limit_deg=p.steer_limit_deg, b_index=site_index, los_only=True, **clear)
    fed_sites = np.unique(bs_site["b"].to_numpy())
    # 2. site -> user for fed sites and (unless asked) users not covered directly.
    want = np.ones(len(users), bool) if p.serve_covered_users else ~direct["covered"].to_numpy(bool)
    if user_index is not None:
        want &= np.isin(np.arange(len(users)), user_index)
    want_users = np.flatnonzero(want)
    site_user = visible_pairs(obstacles, Points.from_table(sites), Points.from_table(users), p.surface_range_m,
                              steer_limit_deg=p.steer_limit_deg, steer_limit_b_deg=p.home_steer_limit_deg,
                              a_index=fed_sites, b_index=want_users, los_only=True, **clear)
    coverage = _surface_coverage(bs, sites, sizes, users, options, bs_site, site_user, bs_user, p, detail)
    return coverage, bs_site, site_user


def compute_gains(obstacles: Obstacles, bs: pd.DataFrame, sites: pd.DataFrame, sizes: pd.DataFrame,
                  users: pd.DataFrame, p: RadioParams) -> GainResult:
    """Run the whole gain stage in one piece; see the module docstring for what comes out."""
    for table, name in ((bs, "base_stations"), (sites, "sites"), (sizes, "sizes"), (users, "users")):
        check(table, name, "gain stage input")
    bs_user = direct_links(obstacles, bs, users, p)
    direct = best_direct(bs_user, len(users), p)
    options = make_options(sites, sizes)
    coverage, bs_site, site_user = surface_links(obstacles, bs, sites, sizes, users, options, bs_user, direct, p)
    return GainResult(direct, options, coverage, bs_site, site_user, bs_user)


def _surface_coverage(bs, sites, sizes, users, options, bs_site, site_user, bs_user, p,
                      detail: bool = False) -> pd.DataFrame:
    """SNR of every (option, user) with the surface, best base station, as a sparse table.

    ``detail`` adds the columns ``surface_rx_dbm``, ``bs_gain_to_surface_dbi`` and ``d1_m`` (for the checks of
    the chosen surfaces).
    """
    cols = ["option_id", "user_id", "snr_db", "bs_idx"]
    if bs_site.empty or site_user.empty or options.empty:
        return pd.DataFrame({c: pd.Series(dtype="int64" if c != "snr_db" else "float64") for c in cols})
    # Triples (bs, site, user): join feeds onto site->user links by site, vectorised through a sort.
    feeds = bs_site[["a", "b", "distance_m"]].rename(columns={"a": "bs", "b": "site", "distance_m": "d1"})
    links = site_user[["a", "b", "distance_m"]].rename(columns={"a": "site", "b": "user", "distance_m": "d2"})
    tri = links.merge(feeds, on="site", how="inner", sort=False)
    # Options per site (sizes that fit), then one row per (bs, option, user).
    opt_site = options["site_id"].to_numpy()
    order = np.argsort(opt_site, kind="stable")
    starts = np.searchsorted(opt_site[order], tri["site"].to_numpy(), side="left")
    ends = np.searchsorted(opt_site[order], tri["site"].to_numpy(), side="right")
    counts = ends - starts
    rep = np.repeat(np.arange(len(tri)), counts)
    within = np.arange(len(rep)) - np.repeat(np.cumsum(counts) - counts, counts)
    opt = order[np.repeat(starts, counts) + within]
    t_bs, t_site, t_user = (tri[c].to_numpy()[rep] for c in ("bs", "site", "user"))
    size_idx = options["size_idx"].to_numpy()[opt]

    geo = {"bs": t_bs, "site": t_site, "user": t_user, "size": size_idx,
           "d1": tri["d1"].to_numpy(float)[rep], "d2": tri["d2"].to_numpy(float)[rep]}
    parts = link_parts(bs, sites, sizes, users, bs_user, geo, p)
    table = pd.DataFrame({"option_id": opt.astype(np.int64), "user_id": t_user.astype(np.int64),
                          "snr_db": parts["snr_db"], "bs_idx": t_bs.astype(np.int64)})
    if detail:
        table["surface_rx_dbm"] = parts["surface_rx_dbm"]
        table["bs_gain_to_surface_dbi"] = parts["bs_gain_to_surface_dbi"]
        table["d1_m"] = geo["d1"]
    table = table[table["snr_db"] >= p.snr_target_db - p.keep_margin_db]
    # Best base station per (option, user).
    table = table.sort_values(["option_id", "user_id", "snr_db"], ascending=[True, True, False], kind="stable")
    table = table.drop_duplicates(["option_id", "user_id"], keep="first").reset_index(drop=True)
    return table


def link_parts(bs, sites, sizes, users, bs_user, geo: dict, p: RadioParams) -> dict:
    """SNR of (station, spot, panel size, user) rows with the surface serving the user, and its parts.

    ``geo`` holds equal-length integer arrays ``bs``, ``site``, ``user``, ``size`` (row positions) and the hop
    lengths ``d1``, ``d2`` [m].  Returns ``snr_db`` (the planning SNR, see :class:`RadioParams`),
    ``surface_rx_dbm`` (median power through the surface at the user, user antenna included) and
    ``bs_gain_to_surface_dbi``.

    The surface path: station gain toward the panel + panel gain (:func:`siting.radio.surface_gain` with the
    job's control, squint, unit cell and efficiency) + user gain - gases over both hops - planning margin -
    on each hop the direct model's excess LOS loss over free space (``surface_hop_model='direct'``).  The
    direct path of the same station to the user: its median power from ``bs_user``, seen through the beam
    aimed at the surface (``station_beam='one_beam'``).  The two add as powers, or as amplitudes when
    ``combining='coherent'`` and the direct path is LOS; with shadow fading the SNR is the level reached with
    ``coverage_probability`` (independent log-normal fading: the direct path by its LOS class, the surface path
    by its two LOS hops, :func:`siting.radio.hop_sigma_db`).
    """
    t_bs, t_site, t_user, size_idx = geo["bs"], geo["site"], geo["user"], geo["size"]
    sxyz = sites[["x", "y", "z_m"]].to_numpy(float)[t_site]
    bxyz = bs[["x", "y", "z_m"]].to_numpy(float)[t_bs]
    uxyz = users[["x", "y", "z_m"]].to_numpy(float)[t_user]
    beta = radio.surface_gain(
        bxyz, uxyz, sxyz, sites["normal_az_deg"].to_numpy(float)[t_site],
        sizes["width_m"].to_numpy(float)[size_idx], sizes["height_m"].to_numpy(float)[size_idx],
        p.frequency_hz, p.reflection_efficiency, p.phase_bits, control=p.control,
        beam_oversampling=p.beam_oversampling, bandwidth_hz=p.bandwidth_hz if p.squint else 0.0,
        element_q=p.element_q, efficiency_curve=p.efficiency_curve,
    )
    with np.errstate(divide="ignore"):
        beta_db = 10.0 * np.log10(beta)
    tx = bs["tx_power_dbm"].to_numpy(float)[t_bs]
    g_surface = _bs_gain(bs, t_bs, *sxyz.T)
    surface_db = (g_surface + p.user_gain_dbi + beta_db - p.gas_db_per_m * (geo["d1"] + geo["d2"])
                  - p.planning_margin_db)
    if p.surface_hop_model == "direct":
        surface_db -= _hop_excess_db(bxyz, sxyz, p) + _hop_excess_db(sxyz, uxyz, p)
    rx_direct, los_direct = _lookup_rx(bs_user, len(users), t_bs, t_user)  # -inf: this station misses the user
    direct_db = rx_direct - tx
    if p.station_beam == "one_beam":
        omni = bs["pattern"].to_numpy(object)[t_bs] == "omni"
        az, tilt, gmax = (bs[c].to_numpy(float)[t_bs] for c in ("azimuth_deg", "downtilt_deg", "max_gain_dbi"))
        to_user, to_surface = uxyz - bxyz, sxyz - bxyz
        (ux, uy, uz), (sx, sy, sz) = to_user.T, to_surface.T
        beam = radio.bs_beam_gain_dbi(ux, uy, uz, sx, sy, sz, az, tilt, gmax, omni)
        direct_db = direct_db - _bs_gain(bs, t_bs, *uxyz.T) + beam
    coherent = los_direct & (p.combining == "coherent")
    level = np.empty(len(tx))
    sigma_s = radio.hop_sigma_db(*(2 * [radio.shadow_fading_sigma_db(p.direct_model, True)])) \
        if p.shadow_fading else 0.0
    for mode, rows in (("coherent", coherent), ("power", ~coherent)):
        if rows.any():
            level[rows] = radio.combined_level_quantile_db(
                (tx + direct_db)[rows], p.fade_sigma_db(los_direct[rows]), (tx + surface_db)[rows], sigma_s,
                p.coverage_probability, combining=mode)
    return {"snr_db": level - p.noise_dbm, "surface_rx_dbm": tx + surface_db, "bs_gain_to_surface_dbi": g_surface}


def _hop_excess_db(a_xyz: np.ndarray, b_xyz: np.ndarray, p: RadioParams) -> np.ndarray:
    """Excess loss [dB] of the direct model's LOS law over free space on hops a -> b (higher end as station)."""
    d2d = np.hypot(b_xyz[:, 0] - a_xyz[:, 0], b_xyz[:, 1] - a_xyz[:, 1])
    with warnings.catch_warnings():  # hops under 10 m follow free space from the 10 m value: no excess to warn of
        warnings.simplefilter("ignore", radio.RadioValidityWarning)
        return radio.los_excess_db(p.direct_model, d2d, np.maximum(a_xyz[:, 2], b_xyz[:, 2]),
                               np.minimum(a_xyz[:, 2], b_xyz[:, 2]), p.frequency_hz)


def _lookup_rx(bs_user: pd.DataFrame, n_users: int, bs_idx: np.ndarray, user_idx: np.ndarray):
    """Direct median received power [dBm] and LOS flag of (bs_idx, user_idx) pairs from the sparse ``bs_user``
    table (-inf and False if absent)."""
    keys = bs_user["a"].to_numpy(np.int64) * n_users + bs_user["b"].to_numpy(np.int64)
    rx = bs_user["rx_dbm"].to_numpy(float)
    los = bs_user["los"].to_numpy(bool)
    if np.any(keys[1:] < keys[:-1]):  # the runner hands it over sorted by (a, b); sort only if not
        order = np.argsort(keys, kind="stable")
        keys, rx, los = keys[order], rx[order], los[order]
    want = bs_idx.astype(np.int64) * n_users + user_idx.astype(np.int64)
    if not len(keys):
        return np.full(len(want), -np.inf), np.zeros(len(want), bool)
    pos = np.minimum(np.searchsorted(keys, want), len(keys) - 1)
    found = keys[pos] == want
    return np.where(found, rx[pos], -np.inf), found & los[pos]


def coverage_matrix(coverage: pd.DataFrame, n_options: int, n_users: int, snr_target_db: float):
    """The boolean CSR matrix (options x users) of entries reaching the target: the optimiser's input."""
    from scipy.sparse import csr_matrix

    hit = coverage[coverage["snr_db"] >= snr_target_db]
    data = np.ones(len(hit), dtype=bool)
    return csr_matrix((data, (hit["option_id"].to_numpy(), hit["user_id"].to_numpy())), shape=(n_options, n_users))
