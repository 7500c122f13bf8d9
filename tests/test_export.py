import os

import pytest

from audit.faces.export import neutralise, write_files


@pytest.mark.parametrize("cell,expected", [
    # OWASP CSV injection guidance: leading = + - @ tab CR start a formula.
    ("=1+1", "'=1+1"), ("+SUM(A1)", "'+SUM(A1)"), ("-2+3", "'-2+3"), ("@cmd", "'@cmd"), ("\tx", "'\tx"),
    ("\rx", "'\rx"), ("-0.25", "-0.25"), ("-1e-5", "-1e-5"), ("north", "north"), (3.5, 3.5), (-2, -2),
])
def test_neutralise(cell, expected):
    assert neutralise(cell) == expected


def test_write_files_is_all_or_nothing(tmp_path):
    out = tmp_path / "out"
    written = write_files(str(out), {"a.csv": b"1\n", "b.json": b"{}\n"})
    assert sorted(os.listdir(out)) == ["a.csv", "b.json"] and len(written) == 2

    with pytest.raises(TypeError):
        write_files(str(out), {"c.csv": b"x", "d.csv": object()})  # second file cannot be written
    assert sorted(os.listdir(out)) == ["a.csv", "b.json"]  # nothing half-written, no temp files left


def test_a_run_interrupted_while_writing_leaves_no_folder(tmp_path, monkeypatch):
    from audit.faces import export

    real = export.write_files
    calls = []

    def failing(out_dir, files):
        calls.append(out_dir)
        real(out_dir, dict(list(files.items())[:1]))
        raise KeyboardInterrupt

    monkeypatch.setattr(export, "write_files", failing)
    out = tmp_path / "new-run"
    with pytest.raises(KeyboardInterrupt):
        export.write_run(str(out), {"slices.csv": b"a\n", "summary.json": b"{}\n"})
    assert not out.exists() and os.listdir(tmp_path) == []  # no folder, no hidden part left
    monkeypatch.setattr(export, "write_files", real)
    written = export.write_run(str(out), {"slices.csv": b"a\n", "summary.json": b"{}\n"})
    assert sorted(os.path.basename(w) for w in written) == ["slices.csv", "summary.json"]
    assert sorted(os.listdir(out)) == [".fissure-run", "slices.csv", "summary.json"]
