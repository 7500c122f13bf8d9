"""Step 3: per-slice sufficient statistics, as sums that add across chunks of rows.

For every slice family (the whole table, each attribute, each pair of attributes) this
module counts the confusion cells of every slice and sums named per-row quantities (the
losses). Everything later (metrics, intervals, tests, fairness) is derived from these sums,
so a table read in chunks, or tallied on several workers, gives the same audit by adding
:class:`Tally` objects: ``tally_a + tally_b``.

Layout
------
A slice's position inside its family is the mixed-radix number of its attribute codes
(first attribute most significant). ``counts[s, y * K + yhat]`` holds the number of rows
of slice ``s`` with true class ``y`` and predicted class ``yhat`` for ``K`` classes (K × K
cells; a binary audit is K = 2). ``sums[s, j]`` holds the sum over the slice's rows of the
quantity named ``sum_names[j]`` (for a binary audit with probabilities: log loss, its
square, Brier score, its square).

Two kernels produce identical counts: a compiled one (numba, one pass over the rows for all
families; loaded only for tables where compiling pays off, see :func:`use_compiled`) and a
plain numpy one (``np.bincount`` per family), the reference. Float sums agree to rounding.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

#: Probabilities are clipped to [EPS, 1 - EPS] before taking logs.
EPS = 1e-15
#: The named sums of a binary audit with probabilities, in the compiled kernel's record order.
LOSS_SUMS = ("log_loss", "log_loss_sq", "brier", "brier_sq")
N_SUMS = len(LOSS_SUMS)
#: Rows per block of the compiled kernel (see ``kernels._binary_kernel``); measured in bench/.
KERNEL_BLOCK = 8192
#: Most classes the compiled tally handles (a record of K² + 4 numbers per slice).
MAX_COMPILED_CLASSES = 12
#: Rows × families from which the compiled kernels are used by default: below it the numpy
#: path is faster than loading numba and its cached kernels (about a second).
COMPILED_MIN_WORK = 5_000_000


def numba_available() -> bool:
    from importlib.util import find_spec

    return find_spec("numba") is not None  # without importing it (about 0.5 s)


def use_compiled(n_rows: int, n_families: int, kernel: str = "auto") -> bool:
    """Whether to use the compiled kernels: ``kernel`` is "compiled", "numpy" or "auto" (by size)."""
    if kernel == "numpy":
        return False
    if kernel == "compiled":
        return numba_available()
    return n_rows * max(n_families, 1) >= COMPILED_MIN_WORK and numba_available()


def row_losses(y: np.ndarray, score: np.ndarray, *, compiled: bool | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Per-row log loss (natural log, clipped at ``EPS``) and Brier score."""
    if compiled is None:
        compiled = use_compiled(len(y), 1)
    if compiled:
        from .kernels import _losses

        return _losses(y.astype(np.int8, copy=False), np.asarray(score, dtype=np.float64), EPS)
    p = np.clip(score, EPS, 1.0 - EPS)
    yb = y.astype(bool)
    ll = -np.log(np.where(yb, p, 1.0 - p))
    br = (score - y) ** 2
    return ll, br


def class_losses(y: np.ndarray, probs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-row multi-class log loss, -ln p(true class) (clipped at ``EPS``), and multi-class Brier
    score, Σ_c (p_c − [y = c])², for class indices ``y`` and a (rows × classes) probability matrix."""
    rows = np.arange(len(y))
    p_true = probs[rows, y.astype(np.intp)]
    ll = -np.log(np.clip(p_true, EPS, 1.0 - EPS))
    br = np.einsum("ij,ij->i", probs, probs) - 2.0 * p_true + 1.0
    return ll, br


def class_rows(y: np.ndarray, probs_by_class: np.ndarray, *, compiled: bool = False):
    """Most probable class (ties: the first), and the multi-class log loss and Brier score of each
    row, from a (classes × rows) probability matrix — one compiled pass for large tables."""
    if compiled:
        from .kernels import _class_rows

        return _class_rows(np.ascontiguousarray(probs_by_class), y.astype(np.int8, copy=False), EPS)
    yhat = np.argmax(probs_by_class, axis=0).astype(np.int8)
    ll, br = class_losses(y, probs_by_class.T)
    return yhat, ll, br


def cell_codes(y: np.ndarray, yhat: np.ndarray, n_classes: int) -> np.ndarray:
    """Each row's confusion cell y·K + ŷ, in the narrowest type holding the K² cells (int8 up to
    eleven classes, int16 up to the fifty allowed)."""
    dt = np.int8 if n_classes * n_classes <= 127 else np.int16
    return (y.astype(np.int16) * n_classes + yhat).astype(dt)


def small_histogram(codes: np.ndarray, size: int, *, compiled: bool = False) -> np.ndarray:
    """Counts of each value of a small unsigned integer array."""
    if compiled:
        from .kernels import small_histogram as hist

        return hist(codes, size)
    return np.bincount(codes, minlength=size)


@dataclass
class Tally:
    """Sums for a list of slice families; ``tally_a + tally_b`` tallies the union of rows.

    ``auc`` holds the evidence for per-slice ROC AUC (see ``audit.core.auc``): exact values
    from one table in memory, which do not add, or score histograms, which do. ``groups``
    is the fairness module's own tally (protected groups by probability bin), or ``None``.
    """

    families: tuple[tuple[int, ...], ...]
    shapes: tuple[tuple[int, ...], ...]
    offsets: np.ndarray  # start row of each family in counts/sums (len = families + 1)
    counts: np.ndarray   # (slices, K*K) int64
    sums: np.ndarray     # (slices, len(sum_names)) float64
    n_classes: int = 2
    sum_names: tuple[str, ...] = LOSS_SUMS
    auc: Any = None
    groups: "Tally | None" = None
    n_unlabelled: int = 0
    extra: dict = field(default_factory=dict)
    #: Families stored sparsely (the triples kept after pruning): family index -> the kept
    #: slices' positions in the family's full mixed-radix layout, increasing. Others are dense.
    slots: dict = field(default_factory=dict)
    #: What the triple plan considered, pruned and kept (see :func:`plan_triples`).
    pruning: dict = field(default_factory=dict)

    def __add__(self, other: "Tally") -> "Tally":
        if (self.families != other.families or self.shapes != other.shapes or self.n_classes != other.n_classes
                or self.sum_names != other.sum_names or self.slots.keys() != other.slots.keys()
                or any(not np.array_equal(v, other.slots[k]) for k, v in self.slots.items())):
            raise ValueError("tallies cover different slice families; encode every chunk with the same encoding")
        auc = None
        if self.auc is not None or other.auc is not None:
            if self.auc is None or other.auc is None:
                raise ValueError("only one of the tallies carries ROC AUC evidence")
            auc = self.auc + other.auc
        groups = None
        if self.groups is not None or other.groups is not None:
            if self.groups is None or other.groups is None:
                raise ValueError("only one of the tallies carries the fairness tally")
            groups = self.groups + other.groups
        extra = {k: self.extra.get(k, 0) + other.extra.get(k, 0) for k in set(self.extra) | set(other.extra)}
        return Tally(self.families, self.shapes, self.offsets, self.counts + other.counts, self.sums + other.sums,
                     self.n_classes, self.sum_names, auc, groups, self.n_unlabelled + other.n_unlabelled, extra,
                     self.slots, self.pruning)

    def family(self, k: int) -> tuple[np.ndarray, np.ndarray]:
        a, b = self.offsets[k], self.offsets[k + 1]
        return self.counts[a:b], self.sums[a:b]

    def positions(self, k: int) -> np.ndarray:
        """Each stored slice's position in family ``k``'s full mixed-radix layout."""
        if k in self.slots:
            return self.slots[k]
        return np.arange(int(self.offsets[k + 1] - self.offsets[k]))

    def joined(self, more: "Tally") -> "Tally":
        """This tally with ``more``'s families appended (same rows, same sums)."""
        if more.sum_names != self.sum_names or more.n_classes != self.n_classes:
            raise ValueError("tallies of the same rows carry the same sums")
        k0 = len(self.families)
        offsets = np.concatenate([self.offsets[:-1], self.offsets[-1] + more.offsets]).astype(np.int64)
        slots = dict(self.slots)
        slots.update({k0 + k: v for k, v in more.slots.items()})
        return Tally(self.families + more.families, self.shapes + more.shapes, offsets,
                     np.concatenate([self.counts, more.counts]), np.concatenate([self.sums, more.sums]),
                     self.n_classes, self.sum_names, self.auc, self.groups, self.n_unlabelled, dict(self.extra),
                     slots, {**self.pruning, **more.pruning})

    @property
    def n_rows(self) -> int:
        return int(self.counts[self.offsets[self.families.index(())]:][0].sum()) if () in self.families \
            else int(self.family(0)[0].sum())

    def named_sums(self) -> dict[str, np.ndarray]:
        return {name: self.sums[:, j] for j, name in enumerate(self.sum_names)}


def plan_families(n_attributes: int, max_order: int) -> list[tuple[int, ...]]:
    fams: list[tuple[int, ...]] = [()]
    if max_order >= 1:
        fams += [(i,) for i in range(n_attributes)]
    if max_order >= 2:
        fams += [(i, j) for i in range(n_attributes) for j in range(i + 1, n_attributes)]
    if max_order >= 3:
        fams += [(i, j, k) for i in range(n_attributes) for j in range(i + 1, n_attributes)
                 for k in range(j + 1, n_attributes)]
    return fams


def _layout(families, cards):
    shapes = tuple(tuple(cards[i] for i in f) for f in families)
    sizes = [math.prod(s) for s in shapes]
    offsets = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    return shapes, offsets


def tally_numpy(codes, cards, cell, ll=None, br=None, *, families, n_classes=2,
                weights: dict[str, np.ndarray] | None = None) -> Tally:
    """Reference kernel: one ``np.bincount`` per family and quantity.

    The named sums are ``weights`` (name -> per-row values) if given, else the binary losses
    ``LOSS_SUMS`` from ``ll`` and ``br`` (none when ``ll`` is None).
    """
    kk = n_classes * n_classes
    shapes, offsets = _layout(families, cards)
    total = int(offsets[-1])
    if weights is None:
        weights = {} if ll is None else dict(zip(LOSS_SUMS, (ll, ll * ll, br, br * br)))
    names = tuple(weights)
    counts = np.zeros((total, kk), dtype=np.int64)
    sums = np.zeros((total, len(names)), dtype=np.float64)
    n = len(cell)
    cell = np.asarray(cell).astype(np.int64)
    for k, fam in enumerate(families):
        size = int(offsets[k + 1] - offsets[k])
        idx = np.zeros(n, dtype=np.int64)
        for a in fam:
            idx = idx * cards[a] + codes[a]
        counts[offsets[k]:offsets[k + 1]] = np.bincount(idx * kk + cell, minlength=size * kk).reshape(size, kk)
        for w, name in enumerate(names):
            sums[offsets[k]:offsets[k + 1], w] = np.bincount(idx, weights=weights[name], minlength=size)
    return Tally(tuple(families), shapes, offsets, counts, sums, n_classes, names)


def tally(codes, cards, cell, ll=None, br=None, *, families, n_classes=2, kernel="auto",
          group_limit: int = 96) -> Tally:
    """Tally every family in ``families`` (tuples of attribute indices).

    ``kernel`` is ``"compiled"``, ``"numpy"`` or ``"auto"`` (compiled for large tables, see
    :func:`use_compiled`; the compiled kernel has the binary record layout and families of at
    most two attributes, anything else uses numpy).
    """
    families = tuple(families)
    if (not use_compiled(len(cell), len(families), kernel) or n_classes > MAX_COMPILED_CLASSES
            or any(len(f) > 2 for f in families)):
        return tally_numpy(codes, cards, cell, ll, br, families=families, n_classes=n_classes)
    pairs = tuple(f for f in families if len(f) == 2)
    if pairs and all(_derivable(f, pairs) for f in families if len(f) < 2):
        # Count only the pairs; every single and the whole table are their margins.
        out = _from_pairs(_grouped_pairs(codes, cards, cell, ll, br, pairs, n_classes, group_limit),
                          families, cards)
    else:
        out = _compiled(codes, cards, cell, ll, br, families, n_classes)
    if ll is None:  # the compiled record always carries the loss sums: drop the zeros
        out = Tally(out.families, out.shapes, out.offsets, out.counts, out.sums[:, :0], out.n_classes, ())
    return out


def plan_groups(cards, limit: int) -> list[list[int]]:
    """Pack attributes into groups whose product of cardinalities stays within ``limit``
    (largest attribute first, filled with the smallest that fit)."""
    order = sorted(range(len(cards)), key=lambda i: (-cards[i], i))
    used: set[int] = set()
    groups = []
    for i in order:
        if i in used:
            continue
        g, prod = [i], cards[i]
        used.add(i)
        for j in reversed(order):
            if j not in used and prod * cards[j] <= limit:
                g.append(j)
                prod *= cards[j]
                used.add(j)
        groups.append(sorted(g))
    return sorted(groups)


def _grouped_pairs(codes, cards, cell, ll, br, pairs, n_classes, limit) -> Tally:
    """Tally attribute pairs through pairs of attribute *groups*.

    Each row updates one cell per pair of groups instead of one per pair of attributes
    (15 instead of 66 updates for the 12-attribute benchmark); each attribute pair is a margin of
    the table of the two groups that hold it (or of any table holding its one group).
    """
    kk = n_classes * n_classes
    groups = plan_groups(cards, limit)
    if len(groups) == len(cards) or len(groups) < 2:
        return _compiled(codes, cards, cell, ll, br, pairs, n_classes)
    where = {a: gi for gi, g in enumerate(groups) for a in g}
    gcards = [math.prod(cards[a] for a in g) for g in groups]
    gpairs = [(i, j) for i in range(len(groups)) for j in range(i + 1, len(groups))]
    acc = _run_group_kernel(codes, cards, cell, ll, br, groups, gcards, gpairs, n_classes)
    gshapes, goffsets = _layout(gpairs, gcards)
    gt = Tally(tuple(gpairs), gshapes, goffsets, None, None, n_classes)
    shapes, offsets = _layout(pairs, cards)
    out = np.zeros((int(offsets[-1]), kk + N_SUMS))
    for k, (i, j) in enumerate(pairs):
        gi, gj = where[i], where[j]
        if gi == gj:
            other = 1 if gi == 0 else 0
            gp = (min(gi, other), max(gi, other))
        else:
            gp = (gi, gj) if gi < gj else (gj, gi)
        f = gpairs.index(gp)
        axes_attrs = groups[gp[0]] + groups[gp[1]]
        block = acc[gt.offsets[f]:gt.offsets[f + 1]].reshape([cards[a] for a in axes_attrs] + [kk + N_SUMS])
        # positions of i and j; if a group appears once, each attribute appears once
        ai, aj = axes_attrs.index(i), axes_attrs.index(j)
        keep = sorted((ai, aj))
        summed = block.sum(axis=tuple(ax for ax in range(len(axes_attrs)) if ax not in keep))
        if ai > aj:
            summed = summed.transpose(1, 0, 2)
        out[offsets[k]:offsets[k + 1]] = summed.reshape(-1, kk + N_SUMS)
    return Tally(tuple(pairs), shapes, offsets, np.rint(out[:, :kk]).astype(np.int64),
                 np.ascontiguousarray(out[:, kk:]), n_classes)


def _derivable(fam, pairs) -> bool:
    return len(fam) == 0 or any(fam[0] in p for p in pairs)


def _from_pairs(pt: Tally, families, cards) -> Tally:
    kk = pt.n_classes ** 2
    shapes, offsets = _layout(families, cards)
    counts = np.zeros((int(offsets[-1]), kk), dtype=np.int64)
    sums = np.zeros((int(offsets[-1]), N_SUMS), dtype=np.float64)
    where = {f: k for k, f in enumerate(pt.families)}
    for k, fam in enumerate(families):
        lo, hi = offsets[k], offsets[k + 1]
        if len(fam) == 2:
            c, s = pt.family(where[fam])
        else:
            p = next(p for p in pt.families if len(fam) == 0 or fam[0] in p)
            c, s = pt.family(where[p])
            c = c.reshape(cards[p[0]], cards[p[1]], kk)
            s = s.reshape(cards[p[0]], cards[p[1]], N_SUMS)
            keep = () if len(fam) == 0 else (p.index(fam[0]),)
            axes = tuple(ax for ax in (0, 1) if ax not in keep)
            c = c.sum(axis=axes).reshape(-1, kk)
            s = s.sum(axis=axes).reshape(-1, N_SUMS)
        counts[lo:hi] = c
        sums[lo:hi] = s
    return Tally(tuple(families), shapes, offsets, counts, sums, pt.n_classes)


def _compiled(codes, cards, cell, ll, br, families, n_classes) -> Tally:
    """Every family through the group kernel, each attribute its own group.

    A constant group with no members (code 0) at index ``len(codes)`` turns singles and the
    whole table into pairs (attribute, constant), so the kernel has one branch-free update.
    """
    n_attr = len(codes)
    groups = [[a] for a in range(n_attr)] + [[]]
    gcards = list(cards) + [1]
    fams = [((f[0] if len(f) > 0 else n_attr), (f[1] if len(f) > 1 else n_attr)) for f in families]
    acc = _run_group_kernel(codes, cards, cell, ll, br, groups, gcards, fams, n_classes)
    kk = n_classes * n_classes
    shapes, offsets = _layout(families, cards)
    return Tally(tuple(families), shapes, offsets, acc[:, :kk].astype(np.int64), np.ascontiguousarray(acc[:, kk:]),
                 n_classes)


def _run_group_kernel(codes, cards, cell, ll, br, groups, gcards, gpairs, n_classes) -> np.ndarray:
    """One pass over the rows; returns the (cells × (K² + 4)) accumulator of the group pairs."""
    kk = n_classes * n_classes
    _, goffsets = _layout(gpairs, gcards)
    ga = np.array([p[0] for p in gpairs], dtype=np.int64)
    gb = np.array([p[1] for p in gpairs], dtype=np.int64)
    gcb = np.array([gcards[p[1]] for p in gpairs], dtype=np.int64)
    if ll is None:
        ll = br = np.zeros(len(cell))
    import numba

    from .kernels import _binary_kernel

    nth = max(1, min(numba.get_num_threads(), 1 + len(cell) // 50_000))
    # Groups × rows matrix of group codes (mixed radix of the members), in the narrowest type;
    # built row by row of the matrix so every numpy step runs over contiguous memory.
    gdt = np.uint16 if max(gcards) <= 65535 else np.int64
    gt = np.empty((len(groups), len(cell)), dtype=gdt)
    for q, g in enumerate(groups):
        v = gt[q]
        if not g:
            v[:] = 0
            continue
        np.copyto(v, codes[g[0]], casting="unsafe")
        for a in g[1:]:
            np.multiply(v, gdt(cards[a]), out=v)
            np.add(v, codes[a], out=v, casting="unsafe")
    total = int(goffsets[-1])
    c8 = cell.astype(np.int8 if kk <= 127 else np.int16, copy=False)  # K > 11 classes: int16 cells
    if n_classes == 2:
        acc = _binary_kernel(gt, c8, ll, br, ga, gb, gcb, goffsets[:-1].copy(), total, nth, KERNEL_BLOCK)
    else:
        from .kernels import _class_kernel

        cnt, sm = _class_kernel(gt, c8, ll, br, ga, gb, gcb, goffsets[:-1].copy(), total, nth, KERNEL_BLOCK, kk)
        acc = np.empty((total, kk + 4))
        acc[:, :kk] = cnt.sum(axis=0, dtype=np.int64).reshape(total, kk)  # int32 per thread: rows < 2**31
        acc[:, kk:] = sm.sum(axis=0).reshape(total, 4)
        return acc
    return acc.sum(axis=0).reshape(total, kk + 4)


# ----------------------------------------------------------------------------- triples
@dataclass(frozen=True)
class TriplePlan:
    """Which triples of values (from three different attributes) to count.

    A triple is kept when each of its three parent pairs has at least ``min_rows`` rows: a
    triple has no more rows than any of its parent pairs, so every pruned triple would have
    been below support and untested. Pruning looks at row counts only, never at outcomes, so
    the tested slices and the correction family are those of the full enumeration.

    Per family: ``rowmaps[f]`` maps each (first, second) value cell to a row of ``luts[f]``
    (-1: that pair is too small), ``luts[f][row, third value]`` is the triple's slot in the
    family (-1: pruned), ``kept[f]`` the kept triples' positions in the full layout.
    """

    families: tuple[tuple[int, int, int], ...]
    shapes: tuple[tuple[int, int, int], ...]
    rowmaps: tuple[np.ndarray, ...]
    luts: tuple[np.ndarray, ...]
    kept: tuple[np.ndarray, ...]
    min_rows: int

    @property
    def possible(self) -> int:
        return int(sum(math.prod(s) for s in self.shapes))

    @property
    def n_kept(self) -> int:
        return int(sum(len(k) for k in self.kept))

    def summary(self) -> dict[str, int]:
        return {"families": len(self.families), "possible": self.possible, "kept": self.n_kept,
                "pruned": self.possible - self.n_kept, "min_rows": self.min_rows}


def plan_triples(pairs: Tally, cards, *, min_rows: int, attributes=None) -> TriplePlan:
    """The triples under pairs with at least ``min_rows`` rows (``pairs`` holds every pair family
    of ``attributes``, default all)."""
    attrs = list(range(len(cards))) if attributes is None else list(attributes)
    where = {f: q for q, f in enumerate(pairs.families) if len(f) == 2}
    ok = {}
    for f, q in where.items():
        c = pairs.family(q)[0].sum(axis=1)
        full = np.zeros(cards[f[0]] * cards[f[1]], dtype=bool)
        full[pairs.positions(q)] = c >= min_rows
        ok[f] = full.reshape(cards[f[0]], cards[f[1]])
    fams, shapes, rowmaps, luts, kept = [], [], [], [], []
    for x in range(len(attrs)):
        for y in range(x + 1, len(attrs)):
            for z in range(y + 1, len(attrs)):
                i, j, k = attrs[x], attrs[y], attrs[z]
                ci, cj, ck = cards[i], cards[j], cards[k]
                a, b = np.nonzero(ok[(i, j)])  # row-major: increasing a*cj + b
                m = ok[(i, k)][a] & ok[(j, k)][b]
                rowmap = np.full(ci * cj, -1, dtype=np.int32)
                rowmap[a * cj + b] = np.arange(len(a), dtype=np.int32)
                lut = np.full(m.shape, -1, dtype=np.int32)
                lut[m] = np.arange(int(m.sum()), dtype=np.int32)
                fams.append((i, j, k))
                shapes.append((ci, cj, ck))
                rowmaps.append(rowmap)
                luts.append(lut.reshape(len(a), ck))
                kept.append((((a * cj + b)[:, None] * ck) + np.arange(ck)[None, :])[m].astype(np.int64))
    return TriplePlan(tuple(fams), tuple(shapes), tuple(rowmaps), tuple(luts), tuple(kept), min_rows)


def _triple_slots(plan: TriplePlan, f: int, codes) -> np.ndarray:
    """Each row's slot in triple family ``f`` (-1 when its triple is pruned)."""
    i, j, k = plan.families[f]
    cj = plan.shapes[f][1]
    r = plan.rowmaps[f][codes[i].astype(np.int64) * cj + codes[j]]
    lut = plan.luts[f]
    if lut.shape[0] == 0:
        return np.full(len(r), -1, dtype=np.int64)
    s = lut[np.maximum(r, 0), codes[k]].astype(np.int64)
    s[r < 0] = -1
    return s


def tally_triples(codes, cards, cell, ll=None, br=None, *, plan: TriplePlan, n_classes: int = 2,
                  loss_sums: bool = True, kernel: str = "auto", group_limit: int = 12) -> Tally:
    """Tally the kept triples of ``plan``; families stored sparsely (``Tally.slots``).

    The sums are the binary losses when ``ll`` is given (none otherwise), so the result joins
    the pairs' tally of the same rows. With ``loss_sums=False`` they are NaN: counting the
    sums costs about three times the counts, and only a loss metric needs them.
    """
    kk = n_classes * n_classes
    sum_names = LOSS_SUMS if ll is not None else ()
    loss_sums = loss_sums and ll is not None
    sizes = [len(k) for k in plan.kept]
    offsets = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
    total = int(offsets[-1])
    slots = {f: plan.kept[f] for f in range(len(plan.families))}
    pruning = {"triples": {**plan.summary(), "loss_sums": bool(loss_sums)}}
    fams = plan.families
    compiled = n_classes == 2 and total > 0 and use_compiled(len(cell), len(fams), kernel)
    sums = np.full((total, len(sum_names)), np.nan)
    if compiled and loss_sums:
        acc = _run_triple_kernel(codes, cell, ll, br, plan, offsets)
        counts = np.rint(acc[:, :kk]).astype(np.int64)
        sums = np.ascontiguousarray(acc[:, kk:])
    elif compiled:
        counts = _grouped_triple_counts(codes, cards, cell, plan, offsets, group_limit)
    else:
        counts = np.zeros((total, kk), dtype=np.int64)
        if loss_sums:
            sums[:] = 0.0
        weights = (ll, ll * ll, br, br * br) if loss_sums else ()
        cell = np.asarray(cell).astype(np.int64)
        for f in range(len(fams)):
            size = sizes[f]
            if not size:
                continue
            s = _triple_slots(plan, f, codes)
            keep = s >= 0
            sk = s[keep]
            lo, hi = offsets[f], offsets[f + 1]
            counts[lo:hi] = np.bincount(sk * kk + cell[keep], minlength=size * kk).reshape(size, kk)
            for w, x in enumerate(weights):
                sums[lo:hi, w] = np.bincount(sk, weights=x[keep], minlength=size)
    return Tally(fams, plan.shapes, offsets, counts, sums, n_classes, sum_names, slots=slots, pruning=pruning)


#: Largest table of group-triple cells (all threads) for the grouped triple counts, in bytes.
TRIPLE_GROUP_BYTES = 1 << 29


def _grouped_triple_counts(codes, cards, cell, plan: TriplePlan, offsets, limit: int) -> np.ndarray:
    """Counts of the kept triples through triples of attribute *groups* (int32 cell counts).

    Like ``_grouped_pairs``: attributes are packed into groups whose product of cardinalities
    stays within ``limit``; each row updates one count per triple of groups (84 instead of 220
    for the 12-attribute benchmark table) and each attribute triple is a margin of the table
    of a group triple holding it. Measured in bench/triples_bench.py: limits 8, 12, 16, 24.
    """
    import numba

    from .kernels import _group_triple_counts

    kk = 4
    nth = max(1, min(numba.get_num_threads(), 1 + len(cell) // 50_000))
    groups = plan_groups(cards, limit)
    gcards = [math.prod(cards[a] for a in g) for g in groups]

    def cells(gs, gc):
        return sum(gc[a] * gc[b] * gc[c] for a in range(len(gs)) for b in range(a + 1, len(gs))
                   for c in range(b + 1, len(gs)))

    if len(groups) < 3 or cells(groups, gcards) * kk * 4 * nth > TRIPLE_GROUP_BYTES:
        groups, gcards = [[a] for a in range(len(cards))], list(cards)
    if cells(groups, gcards) * kk * 4 * nth > TRIPLE_GROUP_BYTES:
        return tally_triples(codes, cards, cell, plan=plan, kernel="numpy").counts
    where = {a: gi for gi, g in enumerate(groups) for a in g}
    ng = len(groups)
    gtr = [(a, b, c) for a in range(ng) for b in range(a + 1, ng) for c in range(b + 1, ng)]
    gsizes = [gcards[a] * gcards[b] * gcards[c] for a, b, c in gtr]
    goff = np.concatenate([[0], np.cumsum(gsizes)]).astype(np.int64)
    gdt = np.uint16 if max(gcards) <= 65535 else np.int64
    gt = np.empty((ng, len(cell)), dtype=gdt)
    for q, g in enumerate(groups):
        v = gt[q]
        np.copyto(v, codes[g[0]], casting="unsafe")
        for a in g[1:]:
            np.multiply(v, gdt(cards[a]), out=v)
            np.add(v, codes[a], out=v, casting="unsafe")
    # gtr runs through the pairs of groups in order, each pair's third groups contiguous.
    pairs, first, ends = [], [], []
    for q, (a, b, _) in enumerate(gtr):
        if not pairs or pairs[-1] != (a, b):
            pairs.append((a, b))
            first.append(q)
            ends.append(q)
        ends[-1] = q + 1
    i64 = lambda xs: np.array(xs, dtype=np.int64)  # noqa: E731
    acc = _group_triple_counts(gt, cell.astype(np.int8, copy=False), i64([p[0] for p in pairs]),
                               i64([p[1] for p in pairs]), i64([gcards[p[1]] for p in pairs]),
                               i64(first), i64(ends), i64([t[2] for t in gtr]),
                               i64([gcards[t[2]] for t in gtr]), goff[:-1].copy(), int(goff[-1]), nth, KERNEL_BLOCK)
    acc = acc.sum(axis=0, dtype=np.int64).reshape(-1, kk)  # the threads' int32 tables, summed as int64
    out = np.zeros((int(offsets[-1]), kk), dtype=np.int64)
    holder: dict[tuple[int, ...], int] = {}  # a set of groups -> the first group triple holding it
    for q, t in enumerate(gtr):
        for sub in ((t[0],), (t[1],), (t[2],), (t[0], t[1]), (t[0], t[2]), (t[1], t[2]), t):
            holder.setdefault(sub, q)
    for f, fam in enumerate(plan.families):
        if not len(plan.kept[f]):
            continue
        q = holder[tuple(sorted({where[a] for a in fam}))]
        gtrip = gtr[q]
        axes_attrs = groups[gtrip[0]] + groups[gtrip[1]] + groups[gtrip[2]]
        block = acc[goff[q]:goff[q + 1]].reshape([cards[a] for a in axes_attrs] + [kk])
        pos = [axes_attrs.index(a) for a in fam]
        summed = block.sum(axis=tuple(ax for ax in range(len(axes_attrs)) if ax not in pos))
        order = np.argsort(np.argsort(pos))  # axes of ``summed`` follow sorted(pos)
        summed = summed.transpose(list(order) + [3])
        out[offsets[f]:offsets[f + 1]] = summed.reshape(-1, kk)[plan.kept[f]]
    return out


def _run_triple_kernel(codes, cell, ll, br, plan: TriplePlan, offsets) -> np.ndarray:
    """One pass over the rows for every kept triple; (kept triples × (4 + 4)) records."""
    import numba

    from .kernels import _triple_kernel

    n = len(cell)
    if ll is None:
        ll = br = np.zeros(n)
    mx = max(int(np.max(c)) if len(c) else 0 for c in codes)
    cdt = np.uint8 if mx < 256 else (np.uint16 if mx < 65536 else np.int64)
    cm = np.empty((len(codes), n), dtype=cdt)
    for a, c in enumerate(codes):
        np.copyto(cm[a], c, casting="unsafe")
    fi = np.array([f[0] for f in plan.families], dtype=np.int64)
    fj = np.array([f[1] for f in plan.families], dtype=np.int64)
    fk = np.array([f[2] for f in plan.families], dtype=np.int64)
    cj = np.array([s[1] for s in plan.shapes], dtype=np.int64)
    ck = np.array([s[2] for s in plan.shapes], dtype=np.int64)
    rm_off = np.concatenate([[0], np.cumsum([len(r) for r in plan.rowmaps])]).astype(np.int64)
    lut_off = np.concatenate([[0], np.cumsum([lt.size for lt in plan.luts])]).astype(np.int64)
    rowmap = np.concatenate(plan.rowmaps).astype(np.int32)
    lut = np.concatenate([lt.reshape(-1) for lt in plan.luts]).astype(np.int32)
    total = int(offsets[-1])
    nth = max(1, min(numba.get_num_threads(), 1 + n // 50_000))
    acc = _triple_kernel(cm, cell.astype(np.int8, copy=False), ll, br, fi, fj, fk, cj, ck, rm_off, rowmap,
                         lut_off, lut, offsets[:-1].copy(), total, nth, KERNEL_BLOCK)
    return acc.sum(axis=0).reshape(total, 8)
