"""Global quantities on MPI ranks equal the single-process ones (``mpiexec -n 2`` and ``-n 3``).

The MPI programs in ``tests/mpi_programs/`` run in a subprocess under the ``mpiexec`` of the
``mpi`` extra (the MPICH wheel); each rank writes its results to a file. The reference is the
single-process path of the same functions on the whole grid (``comm=None``), computed here in
the parent, which also compiles the kernels into Numba's disk cache before the ranks load them.
The grids have sides of 11 to 14 points, so 2 and 3 ranks split them unevenly; three layouts
per run: the default process grid (ghost 2), all ranks along z (ghost 3, more than needed), and
ghost 3 of which only 2 layers are valid (the outer layer holds NaN and must not be read).

Tolerances (eps = 2^-52):

- a sum (energy, momentum, face flux, luminosity, balance totals and rates): P pieces each
  summed to 0.5 eps of their sum of |terms| (``accurate_sum``), combined with P - 1 roundings,
  against one accurate sum: |difference| <= (P + 2) eps * magnitude (:mod:`emsource.reductions`,
  "Round-off of a combine"); magnitudes from the single-process partials;
- a residual or constraint norm: the pointwise residuals themselves may differ by the rounding of
  their stencil sums (the compiler contracts multiply-adds differently in loops of another length
  along z), and a residual's round-off is relative to the largest term of its equation, its
  *scale* (shared testing notes, trap 2): |difference| <= 1e-13 * scale (the issue's requirement;
  measured: below 2e-16 of the scale, since patches evaluate the exact data at the same
  coordinates bit for bit). Normalised norms are compared where the equation's scale
  is significant (more than 1e-12 of the largest of its group, as in
  ``convergence.significant_normalised_l2``); elsewhere they are round-off over round-off;
- counts, maxima of the fields: exactly (order does not change them);
- the balance's mismatch: 1e-13 of its scale, the largest box energy (``BalanceTerms.scale``);
- a convergence table (also ``convergence.run_case`` of a named case): the errors are residual L2 norms, compared to 1e-13 of the equation's
  scale, which is at most 1 / (normalised residual) ~ 10^3 times the error here, so 1e-10 of the
  error; the orders, log ratios of errors at spacings 1.33 apart, then to 1e-9 absolute.

Every rank must hold the same bits: partials are reduced in rank order and broadcast.
"""

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("mpi4py", reason="the mpi extra is not installed: pip install 'emsource[mpi]'")

PROGRAMS = Path(__file__).parent / "mpi_programs"
sys.path.insert(0, str(PROGRAMS))

import patch_cases  # noqa: E402

EPS = np.finfo(float).eps
MPIEXEC = shutil.which("mpiexec", path=str(Path(sys.executable).parent)) or shutil.which("mpiexec")
if MPIEXEC is None:
    pytest.skip("mpiexec not found: the mpi extra's MPICH wheel provides it "
                "(pip install 'emsource[mpi]')", allow_module_level=True)


def run_ranks(ranks, program, *arguments, timeout=120):
    """``mpiexec -n ranks python program arguments``: the completed process."""
    env = dict(os.environ, NUMBA_NUM_THREADS="1")  # ranks share the 2 cores
    return subprocess.run([MPIEXEC, "-n", str(ranks), sys.executable, str(PROGRAMS / program),
                           *map(str, arguments)], capture_output=True, text=True,
                          timeout=timeout, env=env)


@pytest.fixture(scope="module")
def reference():
    """Single-process results and magnitudes (compiles the kernels before the ranks start)."""
    return patch_cases.run_all(lambda grid: grid, None), patch_cases.reference_magnitudes()


def _significant(scale):
    scale = np.asarray(scale)
    return scale > 1e-12 * scale.max()


def check_against_reference(results, reference, magnitudes, ranks):
    for key, values in results.items():
        got, want = np.array(values), np.array(reference[key])
        group, _, name = key.rpartition(" ")
        if key in magnitudes:
            bound = (ranks + 2) * EPS * np.array(magnitudes[key])
        elif key.endswith(("points", "max fields")):
            bound = np.zeros_like(want)
        elif name in ("l2", "max", "scale_l2", "scale_max"):
            scale = np.array(reference[f"{group} scale_{'max' if name.endswith('max') else 'l2'}"])
            bound = np.full_like(want, 1e-13 * scale.max())
        elif name in ("normalised_l2", "normalised_max"):
            keep = _significant(reference[f"{group} scale_l2"])
            got, want = got[keep], want[keep]
            bound = np.full_like(want, 1e-13 * 4)  # ratio of two values, each to 1e-13 of scale
        elif key.endswith("mismatch"):
            bound = np.full_like(want, 1e-13 * abs(reference["balance: totals"][0]))
        elif key.startswith(("convergence: errors", "named convergence: errors")):
            bound = 1e-10 * np.abs(want)
        elif key.startswith(("convergence: orders", "named convergence: orders")):
            bound = np.full_like(want, 1e-9)
        else:
            raise AssertionError(f"no tolerance rule for {key!r}")
        assert np.all(np.abs(got - want) <= bound), (
            f"{key}: ranks give {got}, one process {want}, difference {got - want}, "
            f"allowed {bound}")


@pytest.mark.parametrize("ranks", [2, 3])
def test_every_rank_has_the_single_process_results(ranks, reference, tmp_path):
    done = run_ranks(ranks, "global_quantities.py", tmp_path)
    assert done.returncode == 0, done.stderr[-3000:]
    outputs = [json.loads((tmp_path / f"rank-{r}.json").read_text()) for r in range(ranks)]
    first = outputs[0]["results"]
    assert set(first) == {"process grid, ghost 2", "along z, ghost 3", "ghost 3, 2 valid"}
    for other in outputs[1:]:
        assert other["results"] == first  # the same bits on every rank
    ref, magnitudes = reference
    for layout, results in first.items():
        assert set(results) <= set(ref) and results, layout
        check_against_reference(results, ref, magnitudes, ranks)


#: Scenario of ``bad_patches.py`` -> (ranks that must be named, text the message must hold).
BAD_PATCHES = {
    "overlap": ([0], "overlaps rank 1's at global indices (4, 0, 0) to (4, 11, 10)"),
    "gap": ([2], "leave 132 of 1716 grid points unowned (a gap), first at global index (12, 0, 0)"),
    "spacing": ([1], "spacing (0.08333333333333333, 0.08636363636363636"),
    "origin": ([2], "global origin (0.0, 0.0, 0.01) differs from rank 0's (0.0, 0.0, 0.0)"),
    "thin_ghosts": ([1], "order 4 (stencil radius 2) needs 2 valid ghost layers next to a "
                         "neighbouring patch, found 1 (ghost = 1)"),
    "too_few_valid": ([0, 1, 2], "found 1 (ghost = 2, valid_ghosts = 1)"),
    "nan_on_one_rank": ([2], "grid index (11, 3, 4): non-finite value(s): E[1] = nan"),
    "wrong_shape": ([0], "gamma must cover the patch's local array, grid axes (7, 12, 11)"),
    "not_a_patch": ([1], "the grid is not an emsource.patches.PatchGrid"),
}


def test_bad_patches_and_bad_data_are_reported_on_every_rank(tmp_path):
    """Overlaps, gaps, another spacing or origin, too few ghosts, NaN or a wrong shape on some
    ranks: every rank raises PatchError naming the offending ranks, and all ranks go on to the
    next scenario (nobody is left waiting in a collective call)."""
    done = run_ranks(3, "bad_patches.py", tmp_path, timeout=120)
    assert done.returncode == 0, done.stderr[-3000:]
    outputs = [json.loads((tmp_path / f"rank-{r}.json").read_text()) for r in range(3)]
    assert outputs[2]["fine"] == {"error": None}
    for name, (ranks, text) in BAD_PATCHES.items():
        for r, out in enumerate(outputs):
            found = out[name]
            assert found["error"] == "PatchError", (name, r, found)
            assert found["rank"] == r and f"reported on rank {r} of 3" in found["message"]
            assert [f[0] for f in found["failures"]] == ranks, (name, found)
            assert text in found["message"], (name, found["message"])
            assert found["failures"] == outputs[0][name]["failures"]


def test_an_exception_on_one_rank_ends_every_rank(tmp_path):
    """Rank 1 raises in the caller's code while rank 0 waits in a global quantity: under
    abort_on_error the job ends with an error (the timeout would catch a hang)."""
    done = run_ranks(2, "failing_rank.py", timeout=60)
    assert done.returncode != 0
    assert ("emsource: rank 1 of 2 failed (RuntimeError: the caller's right-hand side blew up "
            "on this rank); aborting all ranks") in done.stderr
    assert "finished" not in done.stdout
