"""Our scrambled Sobol' points are SciPy's, point for point, without importing scipy.stats."""

from __future__ import annotations

import subprocess
import sys
import warnings

import numpy as np
import pytest

from nodecast.compiler.sobol import sobol


@pytest.mark.parametrize("d, n, seed", [(1, 8, 0), (2, 16, 3), (4, 100, 7), (5, 4096, 0),
                                        (12, 33, 1), (40, 257, 11), (3, 1, 2)])
def test_points_equal_scipys_scrambled_sobol(d, n, seed):
    from scipy.stats import qmc  # the reference implementation (SciPy)

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # SciPy warns when n is not a power of two
        want = qmc.Sobol(d=d, scramble=True, seed=seed).random(n)
    assert np.array_equal(sobol(d, n, seed), want)


def _modules_after(args: list[str]) -> set[str]:
    code = ("import sys\nfrom nodecast.cli import main\n"
            "try:\n    main(sys.argv[1:])\n"
            "except SystemExit as exc:\n    assert exc.code in (0, None), exc.code\n"
            "print(' '.join(sorted(sys.modules)))")
    result = subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True,
                            check=True)
    return set(result.stdout.split())


@pytest.mark.slow
def test_help_imports_no_numpy_and_emit_no_scipy_stats(tmp_path, friedman_bundle):
    from nodecast.compiler import save

    assert "numpy" not in _modules_after(["--help"])
    save(friedman_bundle, tmp_path / "m.ncast")
    for target, out in (("python", "m.py"), ("c", "c")):
        loaded = _modules_after(["emit", str(tmp_path / "m.ncast"), "--to", target,
                                 "-o", str(tmp_path / out)])
        assert "scipy.stats" not in loaded and "sklearn" not in loaded, target
