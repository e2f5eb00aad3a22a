"""Fewest distinct parts for a multi-channel board: an exact branch and bound.

The "parts" priority of :mod:`picker.buyer.consolidate` asks for the smallest set S of
part ids such that every channel has a candidate design whose parts all lie in
S (a minimum-union cover). CP-SAT's linear relaxation of this is weak (it lets
channels share fractions of parts), so on plans of several channels with a
few hundred candidates each it finds the optimum quickly but cannot prove it
in seconds. This module proves it and lists every optimal S, so the solver's
later stages can work on the few candidates that fit one.

Method
------
* **Interchangeable parts.** Parts p and q are interchangeable when swapping
  them maps every channel's candidate sets onto themselves. That holds exactly
  when their signatures agree: the set of (channel, candidate minus the part)
  pairs over the candidates that hold the part (if one candidate held both, its
  entry in p's signature would contain q and q's could not). Interchangeability
  is an equivalence, and each class's whole symmetric group maps every
  channel's candidates onto themselves, channel by channel. So a set S is a
  cover exactly when the *canonical* set with the same number of parts from
  each class (the first members of each class) is one, and the search runs
  over canonical sets only (symmetry reduction; the profile of a set is the
  vector of those counts).
* **Search.** Depth first over canonical sets, with a budget B on |S|:
  pick the uncovered channel with the fewest options (each option is the set
  of parts a candidate still needs), branch on its options that hold no other
  option (a smaller need dominates), and keep per channel only the options
  that fit in the budget left (a channel left with none prunes the branch).
  States already seen are skipped (what remains to do depends only on the
  state). With one or two parts of budget left the completions are found in
  closed form (intersections of single-part needs).
* **Optimum.** The budget rises from the trivial bound (the smallest
  candidate of the hardest channel) until some cover exists; every smaller
  budget was searched completely and failed, which is the proof. All
  canonical covers of the optimal size are returned.

Complete and exact on any input (a property test checks it against brute
force over every choice of one candidate per channel); a deadline stops it
and reports the lower bound proven so far.
"""

from __future__ import annotations

import time
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass

__all__ = ["CoverResult", "in_some_cover", "min_part_covers", "part_classes"]

#: One option of a channel: (bitmask of the parts it still needs, how many that is).
Option = tuple[int, int]


@dataclass(frozen=True)
class CoverResult:
    """Outcome of :func:`min_part_covers`.

    Attributes
    ----------
    lower_bound : proven: every cover has at least this many parts.
    size : the optimum (== lower_bound) when ``complete``, else None.
    covers : every optimal cover's part profile as a canonical set of part ids
        (one representative per profile), empty when not complete.
    classes : the interchangeable part classes, each a tuple of ids in the
        order canonical sets take them.
    complete : the search finished before the deadline.
    nodes : search states visited.
    """

    lower_bound: int
    size: int | None
    covers: tuple[frozenset[str], ...]
    classes: tuple[tuple[str, ...], ...]
    complete: bool
    nodes: int


class _Deadline(Exception):
    pass


def part_classes(channels: Sequence[Iterable[frozenset[str]]]) -> list[tuple[str, ...]]:
    """Classes of interchangeable parts (module docstring), each sorted by id."""
    sig: dict[str, set] = {}
    for c, cands in enumerate(channels):
        for cand in cands:
            for p in cand:
                sig.setdefault(p, set()).add((c, cand - {p}))
    groups: dict[frozenset, list[str]] = {}
    for p in sorted(sig):
        groups.setdefault(frozenset(sig[p]), []).append(p)
    return sorted((tuple(g) for g in groups.values()), key=lambda g: g[0])


class _Search:
    """The branch and bound over canonical sets, as Python integer bitmasks."""

    def __init__(
        self,
        channels: Sequence[Iterable[frozenset[str]]],
        classes: Sequence[tuple[str, ...]],
        deadline: float,
    ) -> None:
        self.deadline = deadline
        self.bit: dict[str, int] = {}
        self.class_of: dict[str, int] = {}
        self.class_bits: list[list[int]] = []
        for k, g in enumerate(classes):
            bits = []
            for p in g:
                b = 1 << len(self.bit)
                self.bit[p] = b
                self.class_of[p] = k
                bits.append(b)
            self.class_bits.append(bits)
        self.ids = {b: p for p, b in self.bit.items()}
        self.options = [sorted({self.canonical(c) for c in cands}) for cands in channels]
        self.nodes = 0
        self.seen: set[int] = set()
        self.found: set[int] = set()

    def canonical(self, parts: Iterable[str]) -> int:
        """The canonical mask with the same count per class as ``parts`` (a set)."""
        count: dict[int, int] = {}
        for p in set(parts):
            k = self.class_of[p]
            count[k] = count.get(k, 0) + 1
        out = 0
        for k, t in count.items():
            for b in self.class_bits[k][:t]:
                out |= b
        return out

    def parts_of(self, mask: int) -> frozenset[str]:
        """The part ids of a mask."""
        out = []
        while mask:
            b = mask & -mask
            out.append(self.ids[b])
            mask ^= b
        return frozenset(out)

    # -- the search -------------------------------------------------------------

    def covers(self, budget: int) -> set[int]:
        """Every canonical cover with at most ``budget`` parts (exhaustive)."""
        self.seen.clear()
        self.found = set()
        lists: list[list[Option]] = []
        for opts in self.options:
            if 0 in opts:  # a candidate with no parts covers its channel for free
                continue
            lst = [(o, o.bit_count()) for o in opts if o.bit_count() <= budget]
            if not lst:
                return set()
            lists.append(lst)
        if not lists:
            self.found.add(0)
            return self.found
        lists.sort(key=len)
        self._dfs(0, lists, budget)
        return self.found

    def _dfs(self, s: int, lists: list[list[Option]], left: int) -> None:
        """Extend state ``s`` by the options of the channel with fewest, ``left`` parts to go."""
        self.nodes += 1
        if self.nodes % 256 == 0 and time.perf_counter() > self.deadline:
            raise _Deadline
        piv = min(range(len(lists)), key=lambda i: len(lists[i]))
        rest = lists[:piv] + lists[piv + 1 :]
        # per other channel: every part its options need, and its smallest need; a child
        # that adds none of those parts leaves that need as it is (a quick test first)
        quick = [(_union(lst), min(k for _, k in lst)) for lst in rest]
        for n, k in _minimal(lists[piv]):
            state = s | n
            if state in self.seen:
                continue
            self.seen.add(state)
            l2 = left - k
            if any(m > l2 and not n & u for u, m in quick):
                continue
            new = _filter(rest, n, l2)
            if new is None or (new and l2 == 0):
                continue
            if not new:
                self.found.add(state)
            elif l2 <= 2:
                self.found.update(_finish(state, new, l2))
            else:
                self._dfs(state, new, l2)


def _minimal(opts: Iterable[Option]) -> list[Option]:
    """Options (mask, size) that hold no other option, without repeats, smallest first."""
    out: list[Option] = []
    ones = 0
    for o, k in sorted(set(opts), key=lambda t: (t[1], t[0])):
        if k == 1:
            ones |= o
            out.append((o, k))
        elif not o & ones and (k == 2 or not any(m & o == m for m, j in out if 1 < j < k)):
            out.append((o, k))
    return out


def _union(lst: Iterable[Option]) -> int:
    """Every part the options need, as one mask."""
    u = 0
    for o, _ in lst:
        u |= o
    return u


def _filter(lists: Iterable[list[Option]], n: int, left: int) -> list[list[Option]] | None:
    """Needs after adding parts ``n``: channels now covered drop out; None if one cannot fit."""
    new = []
    for lst in lists:
        out: list[Option] = []
        add = out.append
        for o, k in lst:
            y = o & n
            if not y:
                if k <= left:
                    add((o, k))
            elif y == o:
                break  # covered
            else:
                k2 = k - y.bit_count()
                if k2 <= left:
                    add((o ^ y, k2))
        else:
            if not out:
                return None
            new.append(out)
    new.sort(key=len)
    return new


def _singles(lists: Iterable[list[Option]]) -> int:
    """Parts that complete every channel on their own (bitwise AND of single needs)."""
    both = -1
    for lst in lists:
        acc = 0
        for o, k in lst:
            if k == 1:
                acc |= o
        both &= acc
        if not both:
            return 0
    return both


def _bits(mask: int) -> Iterator[int]:
    """The set bits of ``mask``, lowest first, each as a mask."""
    while mask:
        b = mask & -mask
        yield b
        mask ^= b


def _finish(s: int, lists: list[list[Option]], left: int) -> set[int]:
    """Every cover s | t with |t| <= left, left 1 or 2 (needs hold at most ``left`` parts)."""
    if left == 1:
        return {s | b for b in _bits(_singles(lists))}
    out: set[int] = set()
    piv = min(range(len(lists)), key=lambda i: len(lists[i]))
    rest = lists[:piv] + lists[piv + 1 :]
    for o, k in _minimal(lists[piv]):
        if k == 2:
            if all(any(x & ~o == 0 for x, _ in lst) for lst in rest):
                out.add(s | o)
            continue
        sub = _filter(rest, o, 1)
        if sub is None:
            continue
        if not sub:
            out.add(s | o)
        else:
            out.update(s | o | b for b in _bits(_singles(sub)))
    return out


def min_part_covers(
    channels: Sequence[Sequence[frozenset[str]]],
    *,
    time_limit: float = 10.0,
    upper: int | None = None,
) -> CoverResult:
    """Fewest distinct parts that give every channel one of its candidates, proven.

    Parameters
    ----------
    channels:
        Per channel, its candidates as sets of part ids (each channel needs at
        least one candidate).
    time_limit:
        Seconds before the search gives up (it then returns the bound so far).
    upper:
        Largest budget to try (default: the sum of each channel's smallest
        candidate, which always works).

    Returns
    -------
    CoverResult

    Examples
    --------
    >>> a = [frozenset("AB"), frozenset("CD")]
    >>> b = [frozenset("BC"), frozenset("AE")]
    >>> r = min_part_covers([a, b])
    >>> r.size, sorted(sorted(c) for c in r.covers)
    (3, [['A', 'B', 'C'], ['A', 'B', 'E'], ['B', 'C', 'D']])
    """
    deadline = time.perf_counter() + time_limit
    chans = [[frozenset(c) for c in ch] for ch in channels]
    if any(not ch for ch in chans):
        raise ValueError("every channel needs at least one candidate")
    classes = part_classes(chans)
    search = _Search(chans, classes, deadline)
    lo = max(min(len(c) for c in ch) for ch in chans)
    hi = sum(min(len(c) for c in ch) for ch in chans) if upper is None else upper
    budget = lo
    try:
        while budget <= hi:
            found = search.covers(budget)
            if found:
                covers = tuple(sorted((search.parts_of(m) for m in found), key=sorted))
                return CoverResult(budget, budget, covers, tuple(classes), True, search.nodes)
            budget += 1
    except _Deadline:
        pass
    return CoverResult(budget, None, (), tuple(classes), False, search.nodes)


def in_some_cover(
    channels: Sequence[Sequence[frozenset[str]]], result: CoverResult
) -> list[list[bool]]:
    """Per channel and candidate: can an optimal cover hold it? (needs ``result.complete``)

    True when, for one of the covers' profiles, the candidate needs no more
    parts of any class than the cover holds: a swap of interchangeable parts
    then puts it inside an optimal cover. Every plan with ``result.size``
    distinct parts uses only such candidates (its parts form a cover whose
    profile is one of ``result.covers``).
    """
    class_of = {p: k for k, g in enumerate(result.classes) for p in g}

    def profile(parts: Iterable[str]) -> dict[int, int]:
        out: dict[int, int] = {}
        for p in set(parts):
            k = class_of.get(p, -1)
            out[k] = out.get(k, 0) + 1
        return out

    profiles = [profile(c) for c in result.covers]
    memo: dict[frozenset, bool] = {}
    out = []
    for ch in channels:
        row = []
        for cand in ch:
            key = frozenset(cand)
            if key not in memo:
                want = profile(key)
                memo[key] = any(
                    all(have.get(k, 0) >= t for k, t in want.items()) for have in profiles
                )
            row.append(memo[key])
        out.append(row)
    return out
