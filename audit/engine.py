"""The audit as one call: settings → fit → tally → summarize.

``run`` validates the settings (``audit.settings.make_config``), makes the first pass over
the table (``audit.core.stream.fit``: outcome checks, classes, the attribute encoding), the
second (``tally_source``: the additive tally, chunk by chunk for a file read in chunks), and
hands the tally to ``audit.stats.summarize``. Every output is a view of the result.
"""
from __future__ import annotations

import os
import time
from typing import Any, Callable

import pandas as pd

from .core.stream import Fitted, SourceInfo, fit, open_source, tally_source
from .core.tally import Tally
from .errors import AuditInputError
from .settings import AuditConfig, make_config
from .stats.result import ALL, AuditResult  # noqa: F401  (re-exported)
from .stats.summarize import summarize

Progress = Callable[[str, float], None]

__all__ = ["run", "AuditResult", "ALL", "fit", "summarize", "Tally", "Fitted"]


def run(data: pd.DataFrame | str | os.PathLike, *, source: SourceInfo | None = None, progress: Progress | None = None,
        kernel: str = "auto", engine: str = "local", scheduler: Any = None, **settings: Any) -> AuditResult:
    """Audit a classifier's predictions slice by slice (two classes or more).

    Parameters
    ----------
    data : DataFrame or path
        One row per scored case: the label, a prediction and/or a probability, attributes. A
        path to a CSV or Parquet file (or a folder of Parquet files, or a glob of CSV files)
        is read by Fissure; with ``chunk_rows`` it is read in chunks with memory bounded by
        the chunk.
    label, pred, score : str
        Column names: true label; predicted label; predicted probability of the positive
        class. Give ``pred`` or ``score`` (or both: counts then use ``pred``).
    positive : optional
        The positive class. Inferred for {0, 1}, {False, True}, {no, yes} and similar.
    threshold : float
        With ``score`` only, the prediction is ``score >= threshold`` (0.5).
    attributes : str or list of str, optional
        Columns to slice by (default: every other column; identifier-like ones, columns that look
        like a predicted label (``audit.core.encoding.looks_like_prediction``, the page's rule too)
        and columns that restate the outcome are skipped with a reason). A protected attribute the
        audit skips is refused (``AuditInputError``, setting ``protected``).
    categorical, numeric : str or list of str
        Numeric columns to treat as categories (codes), or to bin even with few values.
    bins, bin_edges
        Quantile bins per numeric column (5), or explicit edges ``{column: [e0, e1, ...]}``.
    metric : str
        The audited metric (see ``audit.stats.methods.METRICS``); default ``error_rate``.
    min_support, min_metric_support : int
        A slice (and its rest) is tested only with at least ``min_support`` rows (30) and at
        least ``min_metric_support`` rows in the metric's denominator (10).
    alpha : float
        Flag when the adjusted p-value is at most ``alpha`` (0.05) and the slice is worse.
    correction : {"bh", "by", "holm", "bonferroni", "none"}
    level : float
        Confidence level of every interval (0.95).
    interval : {"wilson", "clopper-pearson"}
    max_order : {1, 2, 3}
        Single attributes only, pairs too, or triples of values from three attributes as well
        (counted under pairs with at least ``min_support`` rows).
    auc_max_order : {-1, 0, 1, 2}
        Highest slice order for which ROC AUC is computed (needs ``score``; -1: none).
    protected, favorable, reference, min_group_share
        Group fairness: protected attributes, the favourable predicted class, reference groups
        ``{attribute: group}``, and the share under which a group is left out of ratios.
    drop_unlabelled : bool
        Leave out rows with a missing label (counted and reported) instead of stopping.
    encoding : str, optional
        Text encoding of a CSV file (default: UTF-8, strictly).
    chunk_rows : int, optional
        Read a file in chunks of this many rows.
    kernel : {"auto", "compiled", "numpy"}
        Tally kernel (results are identical; "auto" compiles for large tables).
    engine : {"local", "dask"}
        Where the two passes run: in this process, or on a Dask cluster whose workers read
        their own parts of the file (``data`` must then be a path). Not a setting: the
        numbers are the same as a run in chunks here, and it is not written to fissure.toml.
    scheduler : str or distributed.Client, optional
        With ``engine="dask"``: the scheduler's address (``tcp://host:8786``) or a client;
        without it a local cluster is started and shut down.

    Returns
    -------
    AuditResult

    Examples
    --------
    >>> import pandas as pd
    >>> df = pd.DataFrame({"y": [0, 1] * 50, "p": [0.2, 0.7] * 45 + [0.9, 0.1] * 5,
    ...                    "region": ["north"] * 60 + ["south"] * 40})
    >>> res = run(df, label="y", score="p")
    >>> s = res.slice("region=south")
    >>> int(s["n"]), int(s["errors"]), float(s["error_rate"])
    (40, 10, 0.25)
    """
    t0 = time.perf_counter()
    cfg = settings_from(settings)
    from .stats.fairness import plain_references  # a pair's reference may be named as fairness.csv names it

    cfg = plain_references(cfg)
    note = progress or (lambda stage, frac: None)
    note("checking input", 0.0)
    if engine not in ("local", "dask"):
        raise AuditInputError(f"engine must be 'local' or 'dask'; received {engine!r}", setting="engine")
    # Progress: the first pass is 5-45% of the bar, the second 45-90% (each reports per chunk).
    first_pass = lambda stage, frac: note(stage, 0.05 + 0.4 * frac)  # noqa: E731
    second_pass = lambda stage, frac: note(stage, 0.45 + 0.45 * frac)  # noqa: E731
    if engine == "dask" or scheduler is not None:
        from .core.distributed import DaskRun

        with DaskRun(data, cfg, scheduler=scheduler, progress=first_pass, kernel=kernel) as d:
            fitted = d.fit()
            timings = {"input": time.perf_counter() - t0}
            note("counting slices", 0.45)
            t = time.perf_counter()
            d.note = second_pass
            tl = d.tally(fitted)
            timings["tally"] = time.perf_counter() - t
            info = source or d.info
    else:
        src = open_source(data, chunk_rows=cfg.chunk_rows, encoding=cfg.encoding)
        if source is not None:
            src.info = source
        keep: dict = {}
        fitted = fit(src, cfg, progress=first_pass, keep=keep)
        timings = {"input": time.perf_counter() - t0}
        note("counting slices", 0.45)
        t = time.perf_counter()
        tl = tally_source(src, fitted, cfg, keep=keep, kernel=kernel, progress=second_pass)
        timings["tally"] = time.perf_counter() - t
        info = src.info
    note("intervals and tests", 0.9)
    cfg = _resolved(cfg, fitted)
    res = summarize(tl, fitted, cfg, source=info, timings=timings, t0=t0)
    note("done", 1.0)
    return res


def settings_from(settings: dict[str, Any]) -> AuditConfig:
    """The canonical configuration of ``run``'s keyword settings (unknown names are a TypeError,
    as for any Python function)."""
    from .settings import SETTING_NAMES

    unknown = sorted(set(settings) - set(SETTING_NAMES))
    if unknown:
        raise TypeError(f"run() got unexpected keyword argument '{unknown[0]}'")
    return make_config(**settings)


def _resolved(cfg: AuditConfig, fitted: Fitted) -> AuditConfig:
    """The configuration as it ran: the positive class written out when it was inferred, and
    the favourable outcome in the label's own spelling."""
    from dataclasses import replace

    out = cfg
    if fitted.outcomes.positive is not None and cfg.positive != fitted.outcomes.positive:
        out = replace(out, positive=fitted.outcomes.positive)
    if cfg.favorable is not None:
        from .core.outcomes import _match_class

        favs = cfg.favorable if isinstance(cfg.favorable, tuple) else (cfg.favorable,)
        named = []
        for f in favs:
            fav = _match_class(f, fitted.outcomes.classes)
            if fav is None:  # pragma: no cover - checked in the first pass
                raise AuditInputError(f"favourable outcome '{f}' is not a class of the label")
            named.append(fav)
        out = replace(out, favorable=named[0] if len(named) == 1 else tuple(sorted(named)))
    return out
