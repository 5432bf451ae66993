"""The house rules: imports run one way down the stages, and `import baggr` stays light."""
import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_layer_contract_holds():
    # the contract lives in pyproject.toml ([tool.importlinter]); import-linter checks it
    exe = shutil.which("lint-imports", path=str(Path(sys.executable).parent)) or shutil.which("lint-imports")
    assert exe, "import-linter is part of the test extra"
    r = subprocess.run([exe, "--no-cache"], cwd=ROOT, capture_output=True, text=True)
    assert r.returncode == 0, r.stdout[-3000:] + r.stderr[-2000:]
    assert "0 broken" in r.stdout


def test_import_baggr_loads_no_numba_and_no_textual():
    code = ("import sys, baggr; import baggr.runs.journal; "
            "bad = sorted(m for m in sys.modules if m.split('.')[0] in ('numba', 'textual', 'llvmlite') "
            "or m.endswith('_kernels')); print(bad)")
    r = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    assert r.stdout.strip() == "[]"
