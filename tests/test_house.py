"""The shape of the house: the computing core imports no interface and holds no page or HTML
code, and importing the package or asking the command line for help loads nothing heavy."""
import ast
import os
import re
import subprocess
import sys

from conftest import ROOT

CORE = [os.path.join(ROOT, "audit", d) for d in ("core", "stats")] + [
    os.path.join(ROOT, "audit", f) for f in ("engine.py", "settings.py", "errors.py", "__init__.py")]
FACES = ("streamlit", "plotly", "argparse", "audit.faces", "ui", "tqdm", "jinja2")


def _files():
    for p in CORE:
        if os.path.isdir(p):
            for f in sorted(os.listdir(p)):
                if f.endswith(".py"):
                    yield os.path.join(p, f)
        else:
            yield p


def test_core_modules_import_no_face_and_hold_no_markup():
    for path in _files():
        src = open(path, encoding="utf-8").read()
        tree = ast.parse(src)
        for node in ast.walk(tree):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                base = node.module or ""
                if node.level:  # resolve relative imports against the module's package
                    pkg = os.path.relpath(os.path.dirname(path), ROOT).replace(os.sep, ".").split(".")
                    pkg = pkg[: len(pkg) - (node.level - 1)]
                    base = ".".join(pkg + ([base] if base else []))
                names = [base]
            for n in names:
                assert not any(n == f or n.startswith(f + ".") for f in FACES), f"{path} imports {n}"
        assert not re.search(r"<(p|div|table|tr|td|span|section|h[1-6])[ >]", src), f"{path} holds HTML"


def test_an_audit_loads_no_interface_module():
    code = ("import sys, pandas as pd, audit\n"
            "df = pd.DataFrame({'y': [0, 1] * 100, 'p': [0.3, 0.6] * 90 + [0.9, 0.2] * 10,"
            " 'g': ['a', 'b', 'c', 'd'] * 50})\n"
            "audit.run(df, label='y', score='p', protected='g', favorable=0)\n"
            # argparse itself is not checked at run time: scipy.special loads numpy.testing, which loads it
            "bad = sorted(m for m in sys.modules if m.split('.')[0] in ('streamlit', 'plotly', 'ui', 'tqdm')"
            " or m.startswith('audit.faces'))\n"
            "heavy = sorted(m for m in ('scipy.stats', 'numba') if m in sys.modules)\n"
            "print(bad, heavy)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT,
                         env={**os.environ, "PYTHONPATH": ROOT})
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "[] []", out.stdout


def test_help_and_version_import_nothing_heavy():
    code = ("import sys\nfrom audit.faces.cli import main\n"
            "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
            "heavy = sorted(m for m in ('numpy', 'pandas', 'scipy', 'numba', 'plotly', 'pyarrow') if m in sys.modules)\n"
            "print(heavy, file=sys.stderr)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT,
                         env={**os.environ, "PYTHONPATH": ROOT})
    assert out.stderr.strip().splitlines()[-1] == "[]", out.stderr
    assert "usage: fissure" in out.stdout


def test_method_implementations_match_the_registries():
    from audit.stats import compare, correct, intervals, methods

    assert set(correct.CORRECTIONS) == set(methods.CORRECTION_METHODS)
    assert set(intervals.INTERVALS) == set(methods.INTERVAL_METHODS)
    assert set(compare.TESTS) == set(methods.TEST_METHODS)
