"""Names of work levels (private helper of :class:`ptcheck.model.Model`).

A level's label is the label of the user's basis state it *is* (up to a
phase): the state of the user basis (diagonal ``H0``), the k-th eigenstate of
``H0`` (user labels of a non-diagonal ``H0``), or its dominant product state
(product labels of a non-diagonal ``H0``).  Levels that are combinations of
the user's states have no label: a pair ``(|s⟩ ± P|s⟩)/√2`` of a declared
involution is named after both states, a good state of a group that ``V``
mixes is named by rank.  Asking for the label of a user state that is no
level raises :class:`~ptcheck.errors.AmbiguousLevelError` with the levels it
went into.

Product labels (``dims``) are made from indices on demand, so a 2^20-state
chain holds a few integer arrays, not a million tuples.
"""

from __future__ import annotations

from collections.abc import Hashable
from typing import Any

import numpy as np

from .errors import AmbiguousLevelError

__all__ = ["LevelNames", "hashable"]


def hashable(x: Any) -> Hashable:
    """A label in canonical hashable form (numpy ints to int, lists to tuples)."""
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, (list, np.ndarray, tuple)):
        return tuple(hashable(t) for t in x)
    return x


class LevelNames:
    """Label tables of one model (private, read-only after construction).

    Parameters
    ----------
    labels : list or None
        User labels, one per user-basis state (or per eigenstate of H0 in
        ascending order for a non-diagonal H0).
    dims : tuple of int or None
        Product-basis dimensions: labels are the index tuples.
    n_user : int
        Number of user-basis states.
    src : (n,) int array
        User index naming each work level (-1: none).
    ranks : (n,) int array
        Index printed as ``"n=<rank>"`` for a level without a name (the
        parent model's work index for a sub-model).
    pair_lo, pair_hi : (n,) int arrays or None
        The two user states of an involution pair (-1 elsewhere); ``pair_plus``
        (n,) bool: the ``+`` combination.  ``paired_level`` (n_user,): the
        work level made from user state u (-1 if u is not paired).
    groups : (group_of, group_list) or None
        For user states that went into combinations: ``group_of`` (n_user,)
        int array (-1: none) into ``group_list`` of ``(kind, user members,
        work levels)``; kind ``"mixed"`` (good states of a degenerate group
        that V mixes) or ``"operator <name>"`` (eigenstates of a declared
        operator).
    pair_operator : str
        Name of the operator that pairs states (for messages).
    """

    def __init__(
        self,
        *,
        labels: list | None,
        dims: tuple | None,
        n_user: int,
        src: np.ndarray,
        ranks: np.ndarray,
        pair_lo: np.ndarray | None = None,
        pair_hi: np.ndarray | None = None,
        pair_plus: np.ndarray | None = None,
        paired_level: np.ndarray | None = None,
        groups: tuple | None = None,
        pair_operator: str = "",
        lookup: dict | None = None,
    ) -> None:
        self.labels = labels
        self.dims = dims
        self.n_user = n_user
        self.src = src
        self.ranks = ranks
        self.inv = np.full(n_user, -1, dtype=np.int64)
        named = src >= 0
        self.inv[src[named]] = np.flatnonzero(named)
        self.pair_lo = pair_lo
        self.pair_hi = pair_hi
        self.pair_plus = pair_plus
        self.paired_level = paired_level
        self.groups = groups
        self.pair_operator = pair_operator
        self._lookup = lookup

    # ------------------------------------------------------------ user states
    def has_names(self) -> bool:
        return self.labels is not None or self.dims is not None

    def user_label(self, u: int) -> Any:
        if self.labels is not None:
            return self.labels[u]
        if self.dims is not None:
            return tuple(int(q) for q in np.unravel_index(int(u), self.dims))
        return None

    def user_text(self, u: int) -> str:
        lab = self.user_label(u)
        if isinstance(lab, tuple):
            return "|" + ",".join(str(x) for x in lab) + "⟩"
        return str(lab)

    def user_index(self, key: Any) -> int | None:
        """User index of a label, or None if no user state has it."""
        h = hashable(key)
        if self.labels is not None:
            if self._lookup is None:
                self._lookup = {hashable(lab): u for u, lab in enumerate(self.labels)}
            return self._lookup.get(h)
        if self.dims is not None:
            if not isinstance(h, tuple) or len(h) != len(self.dims):
                return None
            if not all(isinstance(q, int) and not isinstance(q, bool) and 0 <= q < d for q, d in zip(h, self.dims)):
                return None
            return int(np.ravel_multi_index(h, self.dims))
        return None

    # ------------------------------------------------------------ levels
    def raw(self, i: int) -> Any:
        u = int(self.src[i])
        return self.user_label(u) if u >= 0 else None

    def all_raw(self) -> tuple:
        return tuple(self.raw(i) for i in range(self.src.size))

    def text(self, i: int) -> str:
        u = int(self.src[i])
        if u >= 0 and self.has_names():
            return self.user_text(u)
        if self.pair_lo is not None and self.pair_lo[i] >= 0 and self.has_names():
            sign = "+" if self.pair_plus[i] else "−"
            return f"{self.user_text(int(self.pair_lo[i]))}{sign}{self.user_text(int(self.pair_hi[i]))}"
        return f"n={int(self.ranks[i])}"

    def index(self, key: Any, model_name: str, n: int) -> int:
        """Work index of the level named ``key`` (a label)."""
        u = self.user_index(key)
        if u is not None:
            w = int(self.inv[u])
            if w >= 0:
                return w
            if self.paired_level is not None and self.paired_level[u] >= 0:
                w = int(self.paired_level[u])
                lo, hi = int(self.pair_lo[w]), int(self.pair_hi[w])
                other = hi if u == lo else lo
                levels = [int(x) for x in (self.paired_level[lo], self.paired_level[hi]) if x >= 0]
                levels = [x for x in levels if self.pair_lo[x] >= 0]
                plus = next((x for x in levels if self.pair_plus[x]), None)
                minus = next((x for x in levels if not self.pair_plus[x]), None)
                parts = []
                if plus is not None:
                    parts.append(f"{self.text(plus)} (rank {int(self.ranks[plus])}, {self.pair_operator} +1)")
                if minus is not None:
                    parts.append(f"{self.text(minus)} (rank {int(self.ranks[minus])}, {self.pair_operator} -1)")
                raise AmbiguousLevelError(
                    f"level {key!r} is not an unperturbed level of this model: the conserved operator "
                    f"{self.pair_operator!r} pairs it with {self.user_label(other)!r} into "
                    + " and ".join(parts)
                    + "; address those levels by energy rank or by their names"
                )
            g = int(self.groups[0][u]) if self.groups is not None else -1
            if g >= 0:
                kind, members, levels = self.groups[1][g]
                shown = [repr(self.user_label(int(m))) for m in members[:8]]
                names = ", ".join(shown) + (", …" if members.size > 8 else "")
                ranks = [int(self.ranks[x]) for x in levels[:16]] + (["…"] if levels.size > 16 else [])
                if kind == "mixed":
                    raise AmbiguousLevelError(
                        f"level {key!r} is ambiguous: it lies in an exactly degenerate group of H0 ({names}) that V "
                        f"mixes, so no single perturbed level belongs to it. Address the group's perturbed levels by "
                        f"energy rank {ranks} (ordered by first-order shift) or use the block treatment."
                    )
                raise AmbiguousLevelError(
                    f"level {key!r} is not an unperturbed level of this model: the conserved {kind} mixes it with "
                    f"({names}); address the resulting levels by energy rank {ranks}"
                )
        # printable names of combination levels ("|0,0⟩+|1,1⟩") are accepted as keys too
        if isinstance(key, str) and self.pair_lo is not None and ("+" in key or "−" in key):
            hit = np.flatnonzero(self.pair_lo >= 0)
            for i in hit:
                if self.text(int(i)) == key:
                    return int(i)
        raise ValueError(f"unknown level {key!r}: not an energy rank in 0..{n - 1} nor a label of {model_name!r}")

    def restrict(self, levels: np.ndarray) -> "LevelNames":
        """Names of a sub-model made of the work ``levels`` (in that order)."""
        n = self.src.size
        loc = np.full(n, -1, dtype=np.int64)
        loc[levels] = np.arange(levels.size)
        paired = None
        if self.paired_level is not None:
            # a user state keeps pointing at its pair if either combination lies in the sub-model
            own = self.paired_level
            safe = np.maximum(own, 0)
            partner = np.where(np.arange(self.n_user) == self.pair_lo[safe], self.pair_hi[safe], self.pair_lo[safe])
            other = np.where(own >= 0, self.paired_level[np.maximum(partner, 0)], -1)
            mine = np.where(own >= 0, loc[safe], -1)
            theirs = np.where(other >= 0, loc[np.maximum(other, 0)], -1)
            paired = np.where(mine >= 0, mine, theirs)
        groups = None
        if self.groups is not None:
            group_of, group_list = self.groups
            kept = [(kind, members, loc[lv][loc[lv] >= 0]) for kind, members, lv in group_list]
            alive = np.array([k[2].size > 0 for k in kept] + [False])
            group_of = np.where(alive[group_of], group_of, -1)
            groups = (group_of, kept)
        return LevelNames(
            labels=self.labels,
            dims=self.dims,
            n_user=self.n_user,
            src=self.src[levels],
            ranks=self.ranks[levels],
            pair_lo=None if self.pair_lo is None else self.pair_lo[levels],
            pair_hi=None if self.pair_hi is None else self.pair_hi[levels],
            pair_plus=None if self.pair_plus is None else self.pair_plus[levels],
            paired_level=paired,
            groups=groups,
            pair_operator=self.pair_operator,
            lookup=self._lookup,
        )
