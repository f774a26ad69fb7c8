"""Start-up: what a command loads before it does any work (issue 14, import costs).

Each check runs a fresh interpreter and lists the modules it loaded, so a heavy import that creeps
back in (pandas, pint, Dask through pint, scipy) makes it fail; timings stay in benchmarks/.
"""

import json
import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
HEAVY = ("numpy", "scipy", "pandas", "pint", "dask", "matplotlib")


def _loaded(code: str) -> dict:
    """Run ``code`` in a fresh interpreter (this checkout first on the path); return what it printed
    as JSON on its last line."""
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    done = subprocess.run([sys.executable, "-c", code], env=env, cwd=str(ROOT), capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_fit_help_loads_no_numerics():
    out = _loaded(
        "import contextlib, io, json, sys\n"
        "from calib.cli import main\n"
        "with contextlib.redirect_stdout(io.StringIO()) as text:\n"
        "    code = main(['fit', '--help'])\n"
        "print(json.dumps(dict(code=code, help='--c-bounds' in text.getvalue(),\n"
        "      heavy=sorted({m.split('.')[0] for m in sys.modules} & set(%r)))))" % (HEAVY,))
    assert out["code"] == 0 and out["help"]  # the help is complete
    assert out["heavy"] == []


def test_units_load_pint_without_dask_and_dask_still_imports_afterwards():
    out = _loaded(
        "import json, sys\n"
        "import calib.units as u\n"
        "before = 'dask' in sys.modules\n"
        "psi = u.to_si('1 psi', 'pressure')\n"
        "import dask, dask.array\n"  # the fire-flow scan's Dask works as before
        "print(json.dumps(dict(before=before, psi=psi, dask=dask.array.ones(3).sum().compute())))")
    assert out["before"] is False
    # 1 psi = 6894.757293 Pa (NIST SP 811, appendix B): pint works as before
    assert abs(out["psi"] - 6894.757293168) < 1e-6
    assert out["dask"] == 3.0


def test_units_leave_pint_alone_where_dask_is_loaded_first():
    out = _loaded(
        "import json\n"
        "import dask\n"
        "import calib.units\n"
        "import pint.compat\n"
        "print(json.dumps(dict(has_dask=bool(pint.compat.HAS_DASK))))")
    assert out["has_dask"] is True


def test_reading_the_demo_town_loads_no_pint():
    # its headers use the units calib.units writes out (pint's own factors): pint's 0.2-0.3 s of
    # import is not paid; a unit outside them loads it
    out = _loaded(
        "import json, sys\n"
        "from calib.network.io import read_network\n"
        "from calib.calibration import read_tests\n"
        "from calib import units\n"
        "net = read_network('field_samples/tallowmere/network')\n"
        "tests = read_tests('field_samples/tallowmere/tests', net)\n"
        "before = 'pint' in sys.modules\n"
        "units.to_si('1 yd', 'length')\n"
        "print(json.dumps(dict(before=before, after='pint' in sys.modules, n=tests.n_tests)))")
    assert out["n"] > 0
    assert out["before"] is False and out["after"] is True


def test_the_demo_fit_command_loads_neither_pandas_nor_the_fortran_wrapper_generator(tmp_path):
    # pandas: the readers, the exports and the report's tables are written without it (0.25 s);
    # scipy's array-API layer star-imports numpy, which loads numpy.f2py (with charset_normalizer
    # and every text codec) and numpy.testing; the command line has them imported lazily
    # (calib.unused_modules): made, never run
    out = _loaded(
        "import contextlib, io, json, sys\n"
        "from calib.cli import main\n"
        "with contextlib.redirect_stdout(io.StringIO()):\n"
        "    code = main(['fit', 'field_samples/tallowmere/network', 'field_samples/tallowmere/tests',\n"
        "                 '--out', %r, '--quiet'])\n"
        "kinds = {m: type(sys.modules[m]).__name__\n"
        "         for m in ('numpy.f2py', 'numpy.testing', 'scipy.spatial',\n"
        "                   'scipy.linalg._decomp_interpolative')\n"
        "         if m in sys.modules}\n"
        "print(json.dumps(dict(code=code, kinds=kinds, scipy='scipy.optimize' in sys.modules,\n"
        "      fft='scipy.fft' in sys.modules,\n"
        "      pandas='pandas' in sys.modules, charset='charset_normalizer' in sys.modules)))"
        % (str(tmp_path / "out"),))
    assert out["code"] == 0 and out["scipy"]
    assert (tmp_path / "out" / "report.html").is_file() and (tmp_path / "out" / "groups.csv").is_file()
    assert out["pandas"] is False
    assert out["charset"] is False
    assert out["fft"] is False  # loaded only by the compiled part of scipy.linalg.interpolative
    # each is absent (a scipy that no longer loads it) or made and never run
    assert all(kind == "_LazyModule" for kind in out["kinds"].values()), out["kinds"]


def test_a_deferred_module_works_when_used():
    out = _loaded(
        "import json, sys\n"
        "from calib import unused_modules\n"
        "unused_modules.defer()\n"
        "import numpy.f2py, numpy.testing, scipy.spatial, scipy.optimize\n"  # as scipy would
        "lazy = type(sys.modules['numpy.testing']).__name__\n"
        "numpy.testing.assert_allclose([1.0], [1.0 + 1e-12])\n"
        "from numpy.testing import assert_equal\n"
        "assert_equal(2, 2)\n"
        "spatial = type(sys.modules['scipy.spatial']).__name__\n"
        "from scipy.spatial import cKDTree\n"
        "near = int(cKDTree([[0.0, 0.0], [3.0, 4.0]]).query([2.9, 3.8])[1])\n"
        "print(json.dumps(dict(lazy=lazy, after=type(sys.modules['numpy.testing']).__name__,\n"
        "      f2py=numpy.f2py.__name__, run=callable(numpy.f2py.run_main), spatial=spatial,\n"
        "      near=near)))")
    assert out["lazy"] == "_LazyModule" and out["after"] == "module"
    assert out["f2py"] == "numpy.f2py" and out["run"] is True
    # scipy.spatial loads when first used: the point (3, 4) is the nearer to (2.9, 3.8)
    assert out["spatial"] == "_LazyModule" and out["near"] == 1


def test_a_deferred_extension_module_works_when_used():
    # scipy.linalg.interpolative's compiled part (deferred: it loads scipy.fft) is made, not run,
    # by scipy.optimize's import, and works when called: an interpolative decomposition of a
    # matrix of rank 2 finds rank 2 (closed form: two independent columns, the rest their sums)
    out = _loaded(
        "import json, sys\n"
        "import numpy as np\n"
        "from calib import unused_modules\n"
        "unused_modules.defer()\n"
        "import scipy.optimize\n"
        "lazy = type(sys.modules['scipy.linalg._decomp_interpolative']).__name__\n"
        "fft = 'scipy.fft' in sys.modules\n"
        "from scipy.linalg.interpolative import interp_decomp\n"
        "a = np.array([[1.0, 0.0], [0.0, 1.0], [2.0, 3.0], [1.0, 5.0]])\n"
        "k, idx, proj = interp_decomp(np.hstack([a, a @ [[1.0], [1.0]]]), 1e-10)\n"
        "print(json.dumps(dict(lazy=lazy, fft=fft, k=int(k), after='scipy.fft' in sys.modules)))")
    assert out["lazy"] == "_LazyModule" and out["fft"] is False
    assert out["k"] == 2 and out["after"] is True
