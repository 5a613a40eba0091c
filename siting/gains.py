"""Link gains: join the visibility pair tables and the radio model into the coverage relation.

Stage contract (DESIGN.md section 3): in go the ``base_stations``, ``sites``, ``sizes`` and ``users`` tables and
the compiled :class:`~siting.visibility.Obstacles`; out come

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

from dataclasses import dataclass

import numpy as np
import pandas as pd

from . import radio
from .tables import Points, check
from .visibility import Obstacles, visible_pairs

C_M_S = 299_792_458.0


@dataclass(frozen=True)
class RadioParams:
    """Physical and planning parameters of the gain stage (units in the names)."""

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

    @classmethod
    def from_job(cls, job: dict) -> "RadioParams":
        r, s = job["radio"], job["surfaces"]
        return cls(
            frequency_hz=r["frequency_ghz"] * 1e9,
            bandwidth_hz=r["bandwidth_mhz"] * 1e6,
            noise_figure_db=r["noise_figure_db"],
            user_gain_dbi=r["user_gain_dbi"],
            direct_model=r["direct_model"],
            planning_margin_db=r["planning_margin_db"],
            gaseous_absorption=r["gaseous_absorption"],
            snr_target_db=r["snr_target_db"],
            bs_range_m=r["bs_range_m"],
            surface_range_m=r["surface_range_m"],
            serve_covered_users=r["serve_covered_users"],
            reflection_efficiency=s["reflection_efficiency"],
            phase_bits=s["phase_bits"],
            steer_limit_deg=s["steer_limit_deg"],
        )

    @property
    def noise_dbm(self) -> float:
        return float(radio.noise_power_dbm(self.bandwidth_hz, self.noise_figure_db))

    @property
    def gas_db_per_m(self) -> float:
        if not self.gaseous_absorption:
            return 0.0
        return float(radio.gaseous_attenuation_db_per_km(self.frequency_hz)) / 1000.0


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
    """Every user's best direct SNR and serving base station (the 'direct' contract) from ``bs_user``."""
    order = np.lexsort((-bs_user["rx_dbm"].to_numpy(), bs_user["b"].to_numpy()))
    best = bs_user.iloc[order].drop_duplicates("b", keep="first")
    snr = np.full(n_users, -np.inf)
    bs_idx = np.full(n_users, -1, np.int64)
    los = np.zeros(n_users, bool)
    ub = best["b"].to_numpy()
    snr[ub] = best["rx_dbm"].to_numpy(float) - p.noise_dbm
    bs_idx[ub] = best["a"].to_numpy()
    los[ub] = best["los"].to_numpy(bool)
    return pd.DataFrame({"user_id": np.arange(n_users, dtype=np.int64), "snr_db": snr, "bs_idx": bs_idx,
                         "los": los, "covered": snr >= p.snr_target_db})


def surface_links(obstacles: Obstacles, bs: pd.DataFrame, sites: pd.DataFrame, sizes: pd.DataFrame,
                  users: pd.DataFrame, options: pd.DataFrame, bs_user: pd.DataFrame, direct: pd.DataFrame,
                  p: RadioParams, site_index: np.ndarray | None = None, user_index: np.ndarray | None = None):
    """Coverage rows of the options at ``site_index`` (all sites when None) and their LOS pair tables.

    ``user_index`` narrows the users considered (a tile passes those within reach of its spots).
    Returns ``(coverage, bs_site, site_user)``.
    """
    # 1. base station -> site, LOS only, incidence inside the steering limit.
    bs_site = visible_pairs(obstacles, Points.from_table(bs), Points.from_table(sites), p.bs_range_m,
                            steer_limit_deg=p.steer_limit_deg, b_index=site_index, los_only=True)
    fed_sites = np.unique(bs_site["b"].to_numpy())
    # 2. site -> user for fed sites and (unless asked) users not covered directly.
    want = np.ones(len(users), bool) if p.serve_covered_users else ~direct["covered"].to_numpy(bool)
    if user_index is not None:
        want &= np.isin(np.arange(len(users)), user_index)
    want_users = np.flatnonzero(want)
    site_user = visible_pairs(obstacles, Points.from_table(sites), Points.from_table(users), p.surface_range_m,
                              steer_limit_deg=p.steer_limit_deg, a_index=fed_sites, b_index=want_users,
                              los_only=True)
    coverage = _surface_coverage(bs, sites, sizes, users, options, bs_site, site_user, bs_user, p)
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


def _surface_coverage(bs, sites, sizes, users, options, bs_site, site_user, bs_user, p) -> pd.DataFrame:
    """SNR of every (option, user) with the surface, best base station, as a sparse table."""
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

    sx, sy, sz = (sites[c].to_numpy(float)[t_site] for c in ("x", "y", "z_m"))
    bx, by, bz = (bs[c].to_numpy(float)[t_bs] for c in ("x", "y", "z_m"))
    ux, uy, uz = (users[c].to_numpy(float)[t_user] for c in ("x", "y", "z_m"))
    beta = radio.surface_gain(
        np.column_stack([bx, by, bz]), np.column_stack([ux, uy, uz]), np.column_stack([sx, sy, sz]),
        sites["normal_az_deg"].to_numpy(float)[t_site],
        sizes["width_m"].to_numpy(float)[size_idx], sizes["height_m"].to_numpy(float)[size_idx],
        p.frequency_hz, p.reflection_efficiency, p.phase_bits,
    )
    with np.errstate(divide="ignore"):
        beta_db = 10.0 * np.log10(beta)
    d_total = tri["d1"].to_numpy(float)[rep] + tri["d2"].to_numpy(float)[rep]
    tx = bs["tx_power_dbm"].to_numpy(float)[t_bs]
    surface_gain_db = (_bs_gain(bs, t_bs, sx, sy, sz) + p.user_gain_dbi + beta_db
                       - p.gas_db_per_m * d_total - p.planning_margin_db)
    direct_gain_db = _lookup_rx(bs_user, len(users), t_bs, t_user) - tx  # -inf: this station misses the user
    snr = radio.coherent_snr_db(tx, direct_gain_db, surface_gain_db, p.noise_dbm)

    table = pd.DataFrame({"option_id": opt.astype(np.int64), "user_id": t_user.astype(np.int64),
                          "snr_db": snr, "bs_idx": t_bs.astype(np.int64)})
    table = table[table["snr_db"] >= p.snr_target_db - p.keep_margin_db]
    # Best base station per (option, user).
    table = table.sort_values(["option_id", "user_id", "snr_db"], ascending=[True, True, False], kind="stable")
    table = table.drop_duplicates(["option_id", "user_id"], keep="first").reset_index(drop=True)
    return table


def _lookup_rx(bs_user: pd.DataFrame, n_users: int, bs_idx: np.ndarray, user_idx: np.ndarray) -> np.ndarray:
    """Direct received power [dBm] of (bs_idx, user_idx) pairs from the sparse ``bs_user`` table (-inf if absent)."""
    keys = bs_user["a"].to_numpy(np.int64) * n_users + bs_user["b"].to_numpy(np.int64)
    rx = bs_user["rx_dbm"].to_numpy(float)
    if np.any(keys[1:] < keys[:-1]):  # the runner hands it over sorted by (a, b); sort only if not
        order = np.argsort(keys, kind="stable")
        keys, rx = keys[order], rx[order]
    want = bs_idx.astype(np.int64) * n_users + user_idx.astype(np.int64)
    pos = np.minimum(np.searchsorted(keys, want), max(len(keys) - 1, 0))
    found = (keys[pos] == want) if len(keys) else np.zeros(len(want), bool)
    return np.where(found, rx[pos] if len(keys) else -np.inf, -np.inf)


def coverage_matrix(coverage: pd.DataFrame, n_options: int, n_users: int, snr_target_db: float):
    """The boolean CSR matrix (options x users) of entries reaching the target: the optimiser's input."""
    from scipy.sparse import csr_matrix

    hit = coverage[coverage["snr_db"] >= snr_target_db]
    data = np.ones(len(hit), dtype=bool)
    return csr_matrix((data, (hit["option_id"].to_numpy(), hit["user_id"].to_numpy())), shape=(n_options, n_users))
