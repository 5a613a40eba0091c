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


class _Index:
    """Options grouped by a key (site, wall or building): dense codes and each code's members."""

    def __init__(self, key):
        self.keys, code = np.unique(np.asarray(key), return_inverse=True)
        self.code = code.ravel().astype(np.int64)
        self.order = np.argsort(self.code, kind="stable")
        self.start = np.searchsorted(self.code[self.order], np.arange(len(self.keys) + 1))

    def sizes(self, codes) -> np.ndarray:
        """Members of each group of ``codes``."""
        codes = np.asarray(codes, np.int64)
        return self.start[codes + 1] - self.start[codes]

    def members(self, codes) -> np.ndarray:
        """All options of the groups ``codes``, group after group (each in option order)."""
        codes = np.asarray(codes, np.int64)
        size = self.sizes(codes)
        return self.order[np.repeat(self.start[codes] - np.cumsum(size) + size, size) + np.arange(size.sum())]

    def codes(self, keys) -> np.ndarray:
        """The codes of those ``keys`` that some option has."""
        keys = np.asarray(keys)
        return np.searchsorted(self.keys, keys)[np.isin(keys, self.keys)]


class _Greedy:
    """Lazy greedy (Minoux's accelerated evaluation) and swap local search on a reduced instance."""

    def __init__(self, C, w, c, site, budget, max_count, conflicts):
        self.C, self.w, self.c = C, w, c
        self.n = C.shape[0]
        self.at_site = _Index(site)
        self.lookup, self.sidx = self.at_site.keys, self.at_site.code
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
        chosen = list(chosen)
        if not chosen or self.n == 0:
            return chosen
        Cf = self.C.astype(np.float64)
        t0 = time.perf_counter()
        total_w = max(float(self.w.sum()), _TINY)
        for _ in range(max_rounds):
            if time.perf_counter() - t0 > time_limit_s:
                break
            gain, a, r = self.best_swap(Cf, np.asarray(chosen))
            if gain <= 1e-9 * total_w:
                break
            chosen[r] = int(a)
            chosen = self.run(chosen)  # fill any slack the swap left
        return chosen

    def best_swap(self, Cf, ch):
        """(gain, a, r) of the best feasible swap of chosen ``ch[r]`` for unchosen option ``a``, or (-inf, 0, 0).

        The gain of a swap is G0[a] + M[a, r] - E[r]: the weight ``a`` adds to the plan, plus the exclusive weight
        of ``ch[r]`` that ``a`` covers again, minus that exclusive weight.  Feasible: ``a``'s site is free or
        ``ch[r]``'s, no other chosen site conflicts with it, and the budget holds.  Ties go to the smallest ``a``,
        then ``r`` (the first maximum of the n x k gain table in row order), without building that table: the
        pairs with M > 0 and the pairs special to one ``r`` (``a`` on its site, or conflicting only with it) are
        evaluated one by one, and for the other options the swap's gain is G0[a] - E[r], whose best ``a`` under
        the budget left by ``r`` comes from a running maximum of G0 over the options sorted by cost.
        """
        c, w, sidx = self.c, self.w, self.sidx
        k = len(ch)
        Csub = Cf[ch]
        cnt = np.bincount(Csub.indices, minlength=Cf.shape[1])
        G0 = Cf @ np.where(cnt == 0, w, 0.0)
        w1 = np.where(cnt == 1, w, 0.0)
        E = Csub @ w1
        M = sp.csc_array(Cf @ sp.diags_array(w1) @ Csub.T)  # weight a re-covers of ch[r]'s exclusive users
        su = np.zeros(self.ns, bool)
        su[sidx[ch]] = True
        is_chosen = np.zeros(self.n, bool)
        is_chosen[ch] = True
        nconf = self.adj @ su.astype(float) if self.adj is not None else np.zeros(self.ns)
        room = np.inf
        if self.budget is not None:
            room = self.budget * (1 + 1e-12) + 1e-12 - c[ch].sum()
        limit = room + c[ch]  # most an incoming option may cost, per r
        # explicit pairs: M > 0, a on r's site, a conflicting with r's site only
        pa, pr = [M.indices], [np.repeat(np.arange(k), np.diff(M.indptr))]
        pa.append(self.at_site.members(sidx[ch]))
        pr.append(np.repeat(np.arange(k), self.at_site.sizes(sidx[ch])))
        if self.adj is not None:
            one = np.flatnonzero((nconf[sidx] == 1) & ~su[sidx])
            code = np.full(self.ns, -1.0)
            code[sidx[ch]] = np.arange(k)
            r_of = np.rint(self.adj @ np.where(su, code + 1.0, 0.0))[sidx[one]].astype(np.int64) - 1
            pa.append(one[r_of >= 0])
            pr.append(r_of[r_of >= 0])
        a_, r_ = np.concatenate(pa).astype(np.int64), np.concatenate(pr).astype(np.int64)
        if self.adj is not None:
            conflict_left = nconf[sidx[a_]] - self.adj[sidx[a_], sidx[ch[r_]]].astype(float)
        else:
            conflict_left = np.zeros(len(a_))
        ok = (~is_chosen[a_] & (~su[sidx[a_]] | (sidx[a_] == sidx[ch[r_]])) & (conflict_left <= 0)
              & (c[a_] <= limit[r_]))  # fmt: skip
        a_, r_ = a_[ok], r_[ok]
        g_pair = G0[a_] + np.asarray(M[a_, r_]).ravel() - E[r_]
        # the other options: free site, no conflict with any chosen site; best G0 within each r's budget
        base = np.flatnonzero(~is_chosen & ~su[sidx] & (nconf[sidx] == 0))
        base = base[np.lexsort((base, c[base]))]
        best_g = np.full(k, -_INF)
        best_a = np.zeros(k, np.int64)
        if len(base):
            g_sorted = G0[base]
            run_max = np.maximum.accumulate(g_sorted)
            seg = np.r_[0, np.cumsum(run_max[1:] > run_max[:-1])]  # a new running maximum starts a segment
            big = self.n + 1
            key = np.where(g_sorted == run_max, base, big) + (seg.max() - seg) * big
            run_a = np.minimum.accumulate(key) - (seg.max() - seg) * big  # smallest option at the running max
            last = np.searchsorted(c[base], limit, side="right") - 1
            has = last >= 0
            best_g[has] = run_max[last[has]]
            best_a[has] = run_a[last[has]]
        g_base = best_g - E
        top = max(g_pair.max(initial=-_INF), g_base.max(initial=-_INF))
        if top == -_INF:
            return -_INF, 0, 0
        cand_a = np.r_[a_[g_pair == top], best_a[g_base == top]]
        cand_r = np.r_[r_[g_pair == top], np.flatnonzero(g_base == top)]
        i = np.lexsort((cand_r, cand_a))[0]
        return float(top), int(cand_a[i]), int(cand_r[i])


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
