"""The result of an audit: one object every output is a view of."""
from __future__ import annotations

import platform
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from .. import __version__
from ..core.encoding import AttributeCoding, Encoding
from ..core.stream import SourceInfo
from ..errors import AuditInputError
from ..settings import AuditConfig
from .intervals import f1_interval, proportion_interval
from .measure import METRICS, RATES, count_frame, metric_values

ALL = "(all)"
class SliceRow(pd.Series):
    """One slice's row; printed with four significant digits, so a p-value of 8e-38 reads 8e-38."""

    @property
    def _constructor(self):
        return SliceRow

    def __repr__(self) -> str:
        def fmt(v):
            return f"{v:.4g}" if isinstance(v, (float, np.floating)) and v == v else v

        plain = pd.Series([fmt(v) for v in self.tolist()], index=self.index, name=self.name, dtype=object)
        with pd.option_context("display.max_rows", None):
            return repr(plain)


#: Older name of the attribute record kept in results.
AttributeInfo = AttributeCoding


@dataclass(frozen=True)
class AuditResult:
    """Everything an audit found; the CLI files, the page, the charts and the report read it.

    ``slices`` has one row per non-empty slice (orders 0, 1, 2), tested or not; its columns
    are documented in DEVELOPERS.md. ``overall`` maps metric names to values and intervals
    for the whole table. ``family_size`` is the number m of tests corrected together.
    """

    slices: pd.DataFrame
    overall: dict[str, Any]
    config: AuditConfig
    source: SourceInfo
    n_rows: int
    classes: tuple[str, ...]
    positive_inferred: bool
    prediction_source: str
    attributes: tuple[AttributeCoding, ...]
    skipped: dict[str, str]
    family_size: int
    timings: dict[str, float] = field(default_factory=dict, compare=False)
    version: str = __version__
    fairness: Any = None
    encoding: Encoding | None = field(default=None, compare=False, repr=False)
    n_unlabelled: int = 0
    method: dict[str, Any] = field(default_factory=dict, compare=False)
    tally: Any = field(default=None, compare=False, repr=False)

    @property
    def metric(self):
        from .methods import metric_for

        return metric_for(self.config.metric)

    def tested(self) -> pd.DataFrame:
        return self.slices[self.slices["status"] == "tested"]

    def flagged(self) -> pd.DataFrame:
        """Flagged slices, worst first."""
        f = self.slices[self.slices["flagged"]]
        return f.sort_values("rank", kind="stable")

    def findings(self) -> pd.DataFrame:
        """Findings (flagged slices no other flagged slice explains), worst first by the
        conservative end of their selection-adjusted interval (``finding_rank``), with
        ``echoes``: how many flagged slices fold under each (see ``audit.stats.findings``)."""
        s = self.slices
        f = s[s["finding"]].sort_values("finding_rank", kind="stable").copy()
        counts = s.loc[s["echo_of"] != "", "echo_of"].value_counts()
        f["echoes"] = f["slice"].map(counts).fillna(0).astype(int).to_numpy()
        return f

    def echoes(self, name: str) -> pd.DataFrame:
        """The flagged slices folded under finding ``name`` (``echo_of``), by their flag rank."""
        s = self.slices
        return s[s["echo_of"] == self.slice(name)["slice"]].sort_values("flag_rank", kind="stable")

    def ranked(self) -> pd.DataFrame:
        """Tested slices, worst first."""
        return self.tested().sort_values("rank", kind="stable")

    def slice(self, name: str) -> pd.Series:
        """One slice by name: ``"a=x & b=y"`` in any order of its parts; unknown names get
        the nearest names as suggestions."""
        hit = self.slices.index[self.slices["slice"] == name]
        if len(hit) == 0:
            canon = self._canonical_name(name)
            hit = self.slices.index[self.slices["slice"] == canon] if canon else hit
        if len(hit) == 0:
            import difflib

            near = difflib.get_close_matches(name, self.slices["slice"].tolist(), n=3, cutoff=0.6)
            hint = f"; did you mean {' or '.join(repr(x) for x in near)}?" if near else ""
            raise AuditInputError(f"no slice named {name!r}{hint}")
        return SliceRow(self.slices.loc[hit[0]])

    def _canonical_name(self, name: str) -> str | None:
        order = {a.name: i for i, a in enumerate(self.attributes)}
        parts = [p.strip() for p in name.split(" & ")]
        keyed = []
        for p in parts:
            attr, sep, _ = p.partition("=")
            if not sep or attr.strip() not in order:
                return None
            keyed.append((order[attr.strip()], p))
        return " & ".join(p for _, p in sorted(keyed))

    def _cell_names(self) -> list[str]:
        return [f"true_{t}_pred_{p}" for t in self.classes for p in self.classes]

    def rest_counts(self, name: str) -> dict[str, int]:
        """Confusion counts of the rows outside slice ``name`` (tp, fp, fn, tn and n for two
        classes; ``true_T_pred_P`` cells and n for more)."""
        s = self.slice(name)
        whole = self.slice(ALL)
        keys = ("tp", "fp", "fn", "tn", "n") if len(self.classes) == 2 else tuple(self._cell_names()) + ("n",)
        return {k: int(whole[k] - s[k]) for k in keys}

    def compare(self, name: str) -> pd.DataFrame:
        """Every metric of slice ``name`` beside the same metric for the rest of the rows, with intervals.

        Columns: ``metric``, ``slice``, ``slice_low``, ``slice_high``, ``rest``, ``rest_low``, ``rest_high``.
        With three or more classes: accuracy, error rate and each class's recall, precision and F1.
        """
        s = self.slice(name)
        rest = self.rest_counts(name)
        lvl, meth = self.config.level, self.config.interval
        rows = []
        if len(self.classes) > 2:
            from .multiclass import class_counts

            k = len(self.classes)
            both = np.array([[int(s[c]) for c in self._cell_names()], [rest[c] for c in self._cell_names()]])
            cube = both.reshape(2, k, k)
            n = cube.sum(axis=(1, 2))
            correct = np.trace(cube, axis1=1, axis2=2)
            for label, num in (("accuracy", correct), ("error_rate", n - correct)):
                lo, hi = proportion_interval(num, n, method=meth, level=lvl)
                v = num / np.maximum(n, 1)
                rows.append((label, v[0], lo[0], hi[0], v[1], lo[1], hi[1]))
            cc = class_counts(cube)
            for i, c in enumerate(self.classes):
                tp, sup, pred, fp, fn = (cc[x][:, i] for x in ("tp", "support", "pred", "fp", "fn"))
                for label, num, den in ((f"recall:{c}", tp, sup), (f"precision:{c}", tp, pred)):
                    lo, hi = proportion_interval(num, den, method=meth, level=lvl)
                    with np.errstate(invalid="ignore", divide="ignore"):
                        v = np.where(den > 0, num / np.maximum(den, 1), np.nan)
                    rows.append((label, v[0], lo[0], hi[0], v[1], lo[1], hi[1]))
                lo, hi = f1_interval(tp, fp, fn, method=meth, level=lvl)
                with np.errstate(invalid="ignore", divide="ignore"):
                    v = np.where(2 * tp + fp + fn > 0, 2 * tp / np.maximum(2 * tp + fp + fn, 1), np.nan)
                rows.append((f"f1:{c}", v[0], lo[0], hi[0], v[1], lo[1], hi[1]))
        else:
            cells = ("tn", "fp", "fn", "tp")  # the cell order of the tally
            c = count_frame(np.array([[int(s[k]) for k in cells], [rest[k] for k in cells]]))
            v = metric_values(c, None)
            for r, (num, den) in RATES.items():
                lo, hi = proportion_interval(c[num], c[den], method=meth, level=lvl)
                rows.append((r, v[r][0], lo[0], hi[0], v[r][1], lo[1], hi[1]))
            lo, hi = f1_interval(c["tp"], c["fp"], c["fn"], method=meth, level=lvl)
            rows.append(("f1", v["f1"][0], lo[0], hi[0], v["f1"][1], lo[1], hi[1]))
        out = pd.DataFrame(rows, columns=["metric", "slice", "slice_low", "slice_high", "rest", "rest_low",
                                          "rest_high"])
        total_errors = int(self.slice(ALL)["errors"])
        out.attrs["share_of_errors"] = float(s["errors"] / total_errors) if total_errors else float("nan")
        return out

    def status_counts(self) -> dict[str, int]:
        st = self.slices.loc[self.slices["order"] > 0, "status"].value_counts()
        out = {k: int(v) for k, v in st.items()}
        out["flagged"] = int(self.slices["flagged"].sum())
        return out

    @property
    def environment(self) -> dict[str, str]:
        import scipy

        return {"python": platform.python_version(), "fissure": __version__, "numpy": np.__version__,
                "pandas": pd.__version__, "scipy": scipy.__version__}
