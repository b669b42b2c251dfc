"""Array kernels of the pattern miner: blocks, bulk prefix projection, instance counts.

Everything here works on whole levels of the prefix tree at once. An *occurrence
list* of one level is a set of parallel arrays

* ``pid``   -- prefix (node) id at this level,
* ``seq``   -- block-local sequence index,
* ``end``   -- block-local position of the last matched item,
* ``start`` -- block-local position of the first matched item (window/gap modes),

grouped so that the entries of one ``(pid, seq)`` pair are contiguous and sorted by
``end``. Three projection modes keep exactly what later levels need:

``first``
    no gap and no window: only the earliest end per ``(pid, seq)`` (the classic
    PrefixSpan projection), extended with a next-occurrence table.
``frontier``
    a window but no gap: the Pareto frontier of ``(start, end)`` pairs per
    ``(pid, seq)`` -- the *minimal windows*; an occurrence with a later start and an
    earlier end dominates, and extending a dominating occurrence with the next
    occurrence of a symbol always dominates again.
``gap``
    a maximum gap: every viable end per ``(pid, seq)``, each with its latest start
    (the latest start dominates for the window test); new ends are enumerated in the
    bounded range the gap allows.
"""

from __future__ import annotations

import numpy as np

__all__ = []  # private module

#: Tokens per block when a next-occurrence table is used (one table row stays in cache).
_NX_BLOCK_TOKENS = 1 << 17
#: Keep all next-occurrence tables between levels when they fit in this many bytes.
_NX_CACHE_BYTES = 512 << 20
#: Target number of tokens per block when no next-occurrence table is needed.
_PLAIN_BLOCK_TOKENS = 1 << 18
#: Largest number of (occurrence, symbol) look-ups expanded at once.
_EXPAND_CHUNK = 1 << 16


def ranges(starts, lengths):
    """Concatenate ``arange(s, s + l)`` for each start/length pair, vectorised."""
    lengths = np.asarray(lengths, dtype=np.int64)
    total = int(lengths.sum())
    if total == 0:
        return np.zeros(0, dtype=np.int64)
    starts = np.asarray(starts, dtype=np.int64)
    nz = lengths > 0
    starts, lengths = starts[nz], lengths[nz]
    out = np.ones(total, dtype=np.int64)
    pos = np.cumsum(lengths)[:-1]
    out[0] = starts[0]
    out[pos] = starts[1:] - (starts[:-1] + lengths[:-1] - 1)
    return np.cumsum(out)


def run_heads(*keys):
    """Boolean mask of the first element of each run of equal key tuples."""
    n = len(keys[0])
    head = np.ones(n, dtype=bool)
    if n > 1:
        same = np.ones(n - 1, dtype=bool)
        for k in keys:
            same &= k[1:] == k[:-1]
        head[1:] = ~same
    return head


class Occ:
    """An occurrence list (see module docstring); ``start`` may be ``None``."""

    __slots__ = ("pid", "seq", "end", "start")

    def __init__(self, pid, seq, end, start=None):
        self.pid = pid
        self.seq = seq
        self.end = end
        self.start = start

    def __len__(self):
        return len(self.pid)

    def take(self, idx):
        """Sub-list at ``idx`` (mask or indices), order preserved."""
        return Occ(self.pid[idx], self.seq[idx], self.end[idx],
                   None if self.start is None else self.start[idx])

    @staticmethod
    def concat(parts, with_start):
        """Concatenate occurrence lists."""
        if not parts:
            z = np.zeros(0, dtype=np.int32)
            return Occ(z, z.copy(), z.copy(), z.copy() if with_start else None)
        return Occ(np.concatenate([p.pid for p in parts]),
                   np.concatenate([p.seq for p in parts]),
                   np.concatenate([p.end for p in parts]),
                   np.concatenate([p.start for p in parts]) if with_start else None)


class Block:
    """A run of whole sequences with block-local positions and lookup tables."""

    def __init__(self, tok, seq_lengths, gidx, seq0, *, n_sym, nonpause=None,
                 max_gap=None, max_window=None, skip_pauses=False):
        self.tok = tok                      # local symbol ids, -1 = not in alphabet
        self.T = len(tok)
        self.n_seq = len(seq_lengths)
        self.seq0 = seq0                    # global index of the first sequence
        off = np.zeros(self.n_seq + 1, dtype=np.int64)
        np.cumsum(seq_lengths, out=off[1:])
        self.seq_start = off[:-1]
        self.seq_end = off[1:]
        self.seq_of_pos = np.repeat(np.arange(self.n_seq, dtype=np.int32), seq_lengths)
        self.gidx = gidx                    # group slot per sequence (n_groups = none)
        self.n_sym = n_sym
        self.skip_pauses = skip_pauses
        self.max_gap = max_gap
        self.max_window = max_window
        self.c = None
        if skip_pauses:
            self.c = np.zeros(self.T + 1, dtype=np.int64)
            np.cumsum(nonpause, out=self.c[1:])
        self._nx = None
        self._by_sym = None
        self.keep_nx = True

    # ------------------------------------------------------------ lookups
    def nx(self):
        """Next-occurrence table, shape (n_sym, T + 2): first position >= i of symbol s.

        Entries past the block hold the sentinel ``T`` (column ``T + 1`` too, so a
        failed lookup can be looked up again); callers compare with the end of the
        occurrence's own sequence.
        """
        if self._nx is not None:
            return self._nx
        T = self.T
        table = np.full((self.n_sym, T + 2), T, dtype=np.int32)
        pos = np.flatnonzero(self.tok >= 0)
        table[self.tok[pos], pos] = pos
        table[:, : T + 1] = np.minimum.accumulate(table[:, T::-1], axis=1)[:, ::-1]
        if self.keep_nx:
            self._nx = table
        return table

    def symbol_counts(self):
        """Occurrences of each symbol in each sequence, shape (n_seq, n_sym)."""
        valid = self.tok >= 0
        key = self.seq_of_pos[valid].astype(np.int64) * self.n_sym + self.tok[valid]
        return np.bincount(key, minlength=self.n_seq * self.n_sym).reshape(
            self.n_seq, self.n_sym)

    def positions_by_symbol(self):
        """(order, bounds): positions sorted by symbol; symbol s at order[bounds[s]:bounds[s+1]]."""
        if self._by_sym is None:
            valid = np.flatnonzero(self.tok >= 0)
            order = valid[np.argsort(self.tok[valid], kind="stable")].astype(np.int32)
            counts = np.bincount(self.tok[valid], minlength=self.n_sym)
            bounds = np.zeros(self.n_sym + 1, dtype=np.int64)
            np.cumsum(counts, out=bounds[1:])
            self._by_sym = (order, bounds)
        return self._by_sym

    def span_ok(self, start, end):
        """Window test for occurrences from ``start`` to ``end`` (inclusive)."""
        if self.skip_pauses:
            return self.c[end.astype(np.int64) + 1] - self.c[start] <= self.max_window
        return end.astype(np.int64) - start + 1 <= self.max_window

    def gap_limit(self, end):
        """Exclusive upper bound of the next item's position after ``end`` (gap rule)."""
        end = end.astype(np.int64)
        se = self.seq_end[self.seq_of_pos[end]]
        if self.skip_pauses:
            hi = np.searchsorted(self.c, self.c[end + 1] + self.max_gap, side="right")
        else:
            hi = end + self.max_gap + 2
        return np.minimum(hi, se)

    def window_limit(self, start):
        """Exclusive upper bound of any later item's position given the first at ``start``."""
        start = start.astype(np.int64)
        if self.skip_pauses:
            return np.searchsorted(self.c, self.c[start] + self.max_window, side="right") - 1
        return start + self.max_window

    def release(self):
        """Drop cached tables (when they do not all fit in memory at once)."""
        if not self.keep_nx:
            self._nx = None


def make_blocks(tokens_local, lengths, gidx, *, n_sym, mode, nonpause=None, **cons):
    """Cut the database into blocks of whole sequences bounded in tokens."""
    budget = _PLAIN_BLOCK_TOKENS if mode == "gap" else _NX_BLOCK_TOKENS
    ends = np.cumsum(lengths)
    blocks = []
    s = 0
    n = len(lengths)
    t0 = 0
    while s < n:
        # largest e > s with ends[e-1] - t0 <= budget (at least one sequence)
        e = int(np.searchsorted(ends, t0 + budget, side="right"))
        e = max(e, s + 1)
        t1 = int(ends[e - 1])
        blocks.append(Block(
            tokens_local[t0:t1], lengths[s:e], gidx[s:e], s, n_sym=n_sym,
            nonpause=None if nonpause is None else nonpause[t0:t1], **cons))
        s, t0 = e, t1
    total = sum(b.T + 2 for b in blocks) * n_sym * 4
    keep = mode != "gap" and total <= _NX_CACHE_BYTES
    for b in blocks:
        b.keep_nx = keep
    return blocks


# ---------------------------------------------------------------- projection
def root_extend(block, syms, mode):
    """Level-1 occurrences of the local symbols ``syms``; ``pid`` holds the symbol."""
    parts = []
    if mode == "first":
        nx = block.nx()
        seqs = np.arange(block.n_seq, dtype=np.int32)
        for s in syms:
            ne = nx[s, block.seq_start]
            ok = ne < block.seq_end
            e = ne[ok]
            parts.append(Occ(np.full(len(e), s, dtype=np.int32), seqs[ok], e))
        return Occ.concat(parts, False)
    order, bounds = block.positions_by_symbol()
    for s in syms:
        pos = order[bounds[s]:bounds[s + 1]]
        parts.append(Occ(np.full(len(pos), s, dtype=np.int32), block.seq_of_pos[pos], pos,
                         pos.copy()))
    return Occ.concat(parts, True)


class LevelPlan:
    """Candidate extensions of one level, prepared once for all blocks.

    Candidate keys are *symbol-major*: ``key = sym * n_pid + pid``. Occurrence lists
    produced in that order stay sorted by (key, seq, end) without any sort, and new
    node ids are assigned in key order.
    """

    def __init__(self, allowed):
        self.allowed = allowed
        self.n_pid, self.n_sym = allowed.shape
        self.allowed_t = np.ascontiguousarray(allowed.T)
        self.pids = [np.flatnonzero(row) for row in self.allowed_t]


def extend(block, occ, plan, mode):
    """Extend every occurrence by every allowed symbol.

    Parameters
    ----------
    block : Block
    occ : Occ
        Occurrences of the current level, sorted by (pid, seq, end).
    plan : LevelPlan
        Candidate extensions per prefix.
    mode : {"first", "frontier", "gap"}

    Returns
    -------
    Occ
        New occurrences whose ``pid`` is the candidate key ``sym * n_pid + pid``
        (int64), sorted by (key, sequence, end).
    """
    if len(occ) == 0:
        return Occ.concat([], mode != "first")
    if mode == "gap":
        return _extend_gap(block, occ, plan)
    return _extend_nx(block, occ, plan, mode)


def _extend_nx(block, occ, plan, mode):
    n_pid = plan.n_pid
    nx = block.nx()
    windowed = mode == "frontier" and block.max_window is not None
    n_p = np.bincount(occ.pid, minlength=n_pid)
    first = np.zeros(n_pid + 1, dtype=np.int64)
    np.cumsum(n_p, out=first[1:])
    e1 = occ.end.astype(np.int64) + 1
    lim = block.seq_end[occ.seq]
    parts = []
    for s in range(plan.n_sym):
        pids = plan.pids[s]
        if pids.size == 0:
            continue
        row = nx[s]
        base = s * n_pid
        if pids.size == n_pid:
            sel = None
            total = len(occ)
        else:
            sel = ranges(first[pids], n_p[pids])
            total = len(sel)
        for c0 in range(0, total, _EXPAND_CHUNK):
            c1 = min(c0 + _EXPAND_CHUNK, total)
            idx = np.arange(c0, c1) if sel is None else sel[c0:c1]
            ne = row[e1[idx]]
            ok = ne < lim[idx]
            idx = idx[ok]
            ne = ne[ok]
            if windowed:
                ok = block.span_ok(occ.start[idx], ne)
                idx = idx[ok]
                ne = ne[ok]
            pid = occ.pid[idx]
            seq = occ.seq[idx]
            if mode == "frontier":
                # same (pid, seq, new end): the later entry has the later start
                last = np.ones(len(idx), dtype=bool)
                if len(idx) > 1:
                    last[:-1] = (pid[1:] != pid[:-1]) | (seq[1:] != seq[:-1]) | \
                        (ne[1:] != ne[:-1])
                idx, ne, pid, seq = idx[last], ne[last], pid[last], seq[last]
                parts.append(Occ(pid.astype(np.int64) + base, seq, ne, occ.start[idx]))
            else:
                parts.append(Occ(pid.astype(np.int64) + base, seq, ne))
    return Occ.concat(parts, mode != "first")


def _extend_gap(block, occ, plan):
    n_pid = plan.n_pid
    lo = occ.end.astype(np.int64) + 1
    hi = block.gap_limit(occ.end)
    if block.max_window is not None:
        hi = np.minimum(hi, block.window_limit(occ.start))
    ln = np.maximum(hi - lo, 0)
    rep = np.repeat(np.arange(len(occ), dtype=np.int64), ln)
    j = ranges(lo, ln)
    sym = block.tok[j]
    ok = sym >= 0
    rep, j, sym = rep[ok], j[ok], sym[ok]
    pid = occ.pid[rep]
    ok = plan.allowed[pid, sym]
    rep, j, sym, pid = rep[ok], j[ok], sym[ok], pid[ok]
    cand = sym.astype(np.int64) * n_pid + pid
    key = cand * (block.T + 1) + j
    order = np.argsort(key, kind="stable")
    key = key[order]
    start = occ.start[rep[order]]
    heads = np.flatnonzero(run_heads(key))
    if heads.size == 0:
        return Occ.concat([], True)
    start = np.maximum.reduceat(start, heads)
    key = key[heads]
    cand = key // (block.T + 1)
    j = (key % (block.T + 1)).astype(np.int32)
    return Occ(cand, block.seq_of_pos[j], j, start.astype(np.int32))


def count_support(block, occ, n_cand, n_slots, cand_index=None):
    """Distinct sequences per (candidate, group slot), shape (n_cand, n_slots)."""
    if len(occ) == 0:
        return np.zeros((n_cand, n_slots), dtype=np.int64)
    head = run_heads(occ.pid, occ.seq)
    cand = occ.pid[head]
    if cand_index is not None:
        cand = cand_index[cand]
    key = cand.astype(np.int64) * n_slots + block.gidx[occ.seq[head]]
    return np.bincount(key, minlength=n_cand * n_slots).reshape(n_cand, n_slots)


# ------------------------------------------------------------ instance counts
def instance_counts(block, occ, mode, pats=None):
    """Instance count per (pid, seq) group of ``occ`` by the earliest-end greedy rule.

    Returns ``(pid, seq, count)`` with one entry per group. ``pats`` (shape
    (n_pid, k), local symbols) is needed in ``first`` mode, where the greedy scan
    continues from the first occurrence with the next-occurrence table.
    """
    if len(occ) == 0:
        z = np.zeros(0, dtype=np.int64)
        return z, z.copy(), z.copy()
    if mode == "first":
        cnt = _jump_counts(block, pats, occ.pid, occ.seq, occ.end)
        return occ.pid, occ.seq, cnt
    start = occ.start.astype(np.int64)
    end = occ.end.astype(np.int64)
    head = run_heads(occ.pid, occ.seq)
    grp = np.cumsum(head) - 1
    M = block.T + 2
    if mode == "gap":
        # keep the minimal windows: start above every start of an earlier end
        key = grp * M + start
        cm = np.maximum.accumulate(key)
        keep = np.ones(len(key), dtype=bool)
        keep[1:] = key[1:] > cm[:-1]
        start, end, grp, head = start[keep], end[keep], grp[keep], head[keep]
    cnt = _chain_counts(grp, start, end, M)
    h = np.flatnonzero(head)
    sel = np.flatnonzero(run_heads(occ.pid, occ.seq))
    return occ.pid[sel], occ.seq[sel], cnt[h]


def _chain_counts(grp, start, end, M):
    """Length of the greedy chain from each entry (entries sorted, starts increasing)."""
    n = len(grp)
    ks = grp * M + start
    ke = grp * M + end
    nxt = np.searchsorted(ks, ke, side="right")
    clipped = np.minimum(nxt, n - 1)
    nxt = np.where((nxt < n) & (grp[clipped] == grp), nxt, n)
    val = np.ones(n + 1, dtype=np.int64)
    val[n] = 0
    ptr = np.append(nxt, n)
    while True:
        if np.all(ptr[:n] == n):
            break
        val = val + val[ptr]
        val[n] = 0
        ptr = ptr[ptr]
    return val[:n]


def _jump_counts(block, pats, pid, seq, end):
    """Greedy earliest-end instance count without constraints, from the first occurrence.

    Each round matches one more instance of every still-active (pattern, sequence)
    pair with ``k`` next-occurrence look-ups; a pair drops out when its last item
    falls past the end of its sequence (positions only grow, so one test per round
    suffices; the sentinel columns keep failed look-ups in range).
    """
    k = pats.shape[1]
    if k == 1:
        table = block.symbol_counts()
        return table[seq, pats[pid, 0]].astype(np.int64)
    nxf = block.nx().ravel()
    T2 = block.T + 2
    n = len(pid)
    cnt = np.ones(n, dtype=np.int64)
    for c0 in range(0, n, _EXPAND_CHUNK):
        c1 = min(c0 + _EXPAND_CHUNK, n)
        a_idx = np.arange(c0, c1)
        a_cols = pats[pid[c0:c1]].astype(np.int64) * T2   # (n, k) row offsets into nxf
        a_pos = end[c0:c1].astype(np.int64) + 1
        a_lim = block.seq_end[seq[c0:c1]]
        while a_idx.size:
            p = a_pos
            for j in range(k):
                p = nxf[a_cols[:, j] + p] + 1
            ok = p <= a_lim
            a_idx = a_idx[ok]
            cnt[a_idx] += 1
            a_pos, a_lim, a_cols = p[ok], a_lim[ok], a_cols[ok]
    return cnt
