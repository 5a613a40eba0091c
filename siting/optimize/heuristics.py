"""Greedy and swap local search on the reduced instance (warm starts and the greedy baseline)."""

from __future__ import annotations

import heapq
import time

import numpy as np
import scipy.sparse as sp

from .problem import _INF, _TINY
from .reductions import _Reduced


def _conflict_adj(site, conflicts, n_sites):
    """Symmetric boolean site adjacency of the conflict pairs (pairs beyond ``n_sites`` ignored), or None."""
    if len(conflicts) == 0:
        return None
    a, b = conflicts[:, 0], conflicts[:, 1]
    keep = (a < n_sites) & (b < n_sites)
    a, b = a[keep], b[keep]
    return sp.csr_array((np.ones(2 * len(a), bool), (np.r_[a, b], np.r_[b, a])), shape=(n_sites, n_sites))


class _Greedy:
    """Lazy greedy (Minoux's accelerated evaluation) and swap local search on a reduced instance."""

    def __init__(self, C, w, c, site, budget, max_count, conflicts):
        self.C, self.w, self.c = C, w, c
        self.n = C.shape[0]
        if len(site):
            self.lookup, self.sidx = np.unique(site, return_inverse=True)
        else:
            self.lookup, self.sidx = np.zeros(0, int), np.zeros(0, int)
        ns = len(self.lookup)
        cf = np.zeros((0, 2), np.int64)
        if len(conflicts) and ns:
            known = np.isin(conflicts, self.lookup).all(axis=1)
            cf = np.searchsorted(self.lookup, conflicts[known])
        self.adj = _conflict_adj(self.sidx, cf, ns)
        self.ns = ns
        self.budget, self.max_count = budget, max_count
        self.scale = max(float(c.max()) if len(c) else 1.0, 1.0) * 1e-9

    def value(self, chosen):
        if len(chosen) == 0:
            return 0.0
        cov = np.zeros(self.C.shape[1], bool)
        cov[self.C[np.asarray(chosen)].indices] = True
        return float(self.w[cov].sum())

    def _key(self, gain, j):
        if self.budget is not None:
            return gain / (self.c[j] + self.scale)
        return gain

    def run(self, start=()):
        C, w, c = self.C, self.w, self.c
        chosen = list(start)
        covered = np.zeros(C.shape[1], bool)
        site_used = np.zeros(self.ns, bool)
        blocked = np.zeros(self.ns, bool)
        spent = 0.0
        for j in chosen:
            covered[C.indices[C.indptr[j]:C.indptr[j + 1]]] = True
            site_used[self.sidx[j]] = True
            spent += c[j]
        if self.adj is not None and chosen:
            blocked |= (self.adj @ site_used.astype(float)) > 0
        if self.max_count is not None and len(chosen) >= self.max_count:
            return chosen
        wcov = np.where(covered, 0.0, w)
        gains = C.astype(np.float64) @ wcov
        cand = np.flatnonzero((gains > 0) & ~site_used[self.sidx] & ~blocked[self.sidx])
        keys = gains[cand] / (c[cand] + self.scale) if self.budget is not None else gains[cand]
        # heap of (-key, cost, index): ties toward lower cost, then lower index (deterministic)
        heap = list(zip((-keys).tolist(), c[cand].tolist(), cand.tolist()))
        heapq.heapify(heap)
        budget = self.budget
        while heap:
            negk, cj, j = heapq.heappop(heap)
            s = self.sidx[j]
            if site_used[s] or blocked[s] or (budget is not None and spent + cj > budget * (1 + 1e-12) + 1e-12):
                continue  # never becomes feasible again
            idx = C.indices[C.indptr[j]:C.indptr[j + 1]]
            g = float(w[idx][~covered[idx]].sum())
            if g <= 0:
                continue
            k = self._key(g, j)
            if heap and -heap[0][0] > k * (1 + 1e-12):
                heapq.heappush(heap, (-k, cj, j))
                continue
            chosen.append(j)
            covered[idx] = True
            site_used[s] = True
            spent += cj
            if self.adj is not None:
                blocked[self.adj.indices[self.adj.indptr[s]:self.adj.indptr[s + 1]]] = True
            if self.max_count is not None and len(chosen) >= self.max_count:
                break
        return chosen

    def best_single(self):
        tot = self.C.astype(float) @ self.w
        ok = np.ones(self.n, bool) if self.budget is None else self.c <= self.budget
        if self.max_count == 0 or not ok.any():
            return []
        t = np.where(ok, tot, -1.0)
        best = t.max()
        if best <= 0:
            return []
        j = np.flatnonzero(t == best)
        j = j[np.lexsort((j, self.c[j]))][0]
        return [int(j)]

    def khuller(self):
        g = self.run()
        s = self.best_single()
        return s if self.value(s) > self.value(g) else g

    def local_search(self, chosen, max_rounds=50, time_limit_s=10.0):
        """Best-improvement swaps (one chosen option out, one unchosen in) while the covered weight grows."""
        C, w, c = self.C, self.w, self.c
        chosen = list(chosen)
        if not chosen or self.n == 0:
            return chosen
        Cf = C.astype(np.float64)
        t0 = time.perf_counter()
        total_w = max(float(w.sum()), _TINY)
        for _ in range(max_rounds):
            if time.perf_counter() - t0 > time_limit_s:
                break
            ch = np.asarray(chosen)
            cnt = np.asarray(Cf[ch].sum(axis=0)).ravel()
            w0 = np.where(cnt == 0, w, 0.0)
            w1 = np.where(cnt == 1, w, 0.0)
            G0 = Cf @ w0  # gain of adding a to the plan as it is
            Csub = Cf[ch]
            E = Csub @ w1  # exclusive weight of each chosen option
            M = (Cf @ sp.diags_array(w1) @ Csub.T).toarray()  # weight a re-covers of r's exclusive users
            gain = G0[:, None] + M - E[None, :]
            # feasibility of swapping r (column) out for a (row) in
            su = np.zeros(self.ns, bool)
            su[self.sidx[ch]] = True
            sa = self.sidx
            feas = (~su[sa])[:, None] | (sa[:, None] == self.sidx[ch][None, :])
            feas[ch, :] = False
            if self.adj is not None:
                nconf = self.adj @ su.astype(float)
                pair = self.adj[sa][:, self.sidx[ch]].toarray().astype(float)
                feas &= (nconf[sa][:, None] - pair) <= 0
            if self.budget is not None:
                spent = c[ch].sum()
                feas &= (spent - c[ch][None, :] + c[:, None]) <= self.budget * (1 + 1e-12) + 1e-12
            gain = np.where(feas, gain, -_INF)
            a, r = np.unravel_index(np.argmax(gain), gain.shape)
            if gain[a, r] <= 1e-9 * total_w:
                break
            chosen[r] = int(a)
            chosen = self.run(chosen)  # fill any slack the swap left
        return chosen


def _greedy_plan(red: _Reduced, budget, max_count, local=True, ls_time_s=10.0):
    """(sorted greedy plan in reduced numbering, the greedy object): Khuller's rule, then swaps if ``local``."""
    g = _Greedy(red.C, red.w * red.mult if red.cap is not None else red.w, red.c, red.site, budget, max_count,
                red.conflicts)
    ch = g.khuller()
    if local:
        ch = g.local_search(ch, time_limit_s=ls_time_s)
    return np.asarray(sorted(ch), np.int64), g


def _prune(red: _Reduced, chosen_red):
    """Drop chosen options that add no covered weight (most expensive first): cost goes down, coverage stays."""
    chosen = np.asarray(chosen_red, np.int64)
    if len(chosen) < 2:
        return chosen
    C = red.C
    cnt = np.bincount(C[chosen].indices, minlength=C.shape[1])  # chosen options covering each user class
    keep = np.ones(len(chosen), bool)
    for i in np.lexsort((-chosen, -red.c[chosen])):  # most expensive first
        idx = C.indices[C.indptr[chosen[i]]:C.indptr[chosen[i] + 1]]
        if np.all(cnt[idx] > 1) or red.w[idx].sum() == 0:
            keep[i] = False
            cnt[idx] -= 1
    return np.sort(chosen[keep])


def _min_cost_greedy(red: _Reduced, target, budget, max_count):
    """Ratio greedy until the target weight is reached, then drop redundant options, most expensive first."""
    w = red.w * red.mult if red.cap is not None else red.w
    g = _Greedy(red.C, w, red.c, red.site, _INF, None, red.conflicts)  # infinite budget: weight-per-cost keys
    order = g.run()
    chosen = []
    covered = np.zeros(red.C.shape[1], bool)
    got = 0.0
    for j in order:
        if got >= target * (1 - 1e-12):
            break
        idx = red.C.indices[red.C.indptr[j]:red.C.indptr[j + 1]]
        got += float(w[idx][~covered[idx]].sum())
        covered[idx] = True
        chosen.append(j)
    if got < target * (1 - 1e-12):
        return np.zeros(0, np.int64), g
    for j in sorted(chosen, key=lambda j: (-red.c[j], -j)):
        rest = [k for k in chosen if k != j]
        if g.value(rest) >= target * (1 - 1e-12):
            chosen = rest
    if (budget is not None and red.c[chosen].sum() > budget) or (max_count is not None and len(chosen) > max_count):
        return np.zeros(0, np.int64), g
    return np.asarray(sorted(chosen), np.int64), g
