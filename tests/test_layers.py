"""The package's layers: each subpackage imports only from those below it, and figures import no solver
(two contracts in pyproject.toml).

The contract is checked by import-linter, which reads every import statement,
those inside functions included.  The second test proves the check can fail:
it copies the package, adds one upward import (the lowest layer reaching for
the command line) and expects the contract to break; the next does the same
for a figure importing transport, spectra or leads.  The third builds a
wheel, as a non-editable install would, and checks every subpackage is in it.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
SUBPACKAGES = ("system", "electrostatics", "leads", "transport", "spectra", "analysis", "io", "plots")


def _lint(cwd: Path) -> subprocess.CompletedProcess:
    lint = Path(sys.executable).with_name("lint-imports")
    return subprocess.run([str(lint), "--config", str(cwd / "pyproject.toml"), "--no-cache"], cwd=cwd,
                          capture_output=True, text=True, env={"PYTHONPATH": str(cwd), "PATH": "/usr/bin:/bin"})


def test_layers_contract_is_kept():
    result = _lint(ROOT)
    assert result.returncode == 0, result.stdout + result.stderr
    assert "2 kept, 0 broken" in result.stdout


def test_an_upward_import_breaks_the_contract(tmp_path):
    shutil.copytree(ROOT / "rgftrans", tmp_path / "rgftrans", ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copy(ROOT / "pyproject.toml", tmp_path / "pyproject.toml")
    geometry = tmp_path / "rgftrans" / "system" / "geometry.py"
    geometry.write_text(geometry.read_text() + "\n\ndef _upward():\n    from rgftrans.cli import main  # noqa: F401\n")
    result = _lint(tmp_path)
    assert result.returncode != 0
    assert "rgftrans.system is not allowed to import rgftrans.cli" in result.stdout


@pytest.mark.parametrize("solver", ["rgftrans.transport.rgf import transmission",
                                    "rgftrans.spectra.poles import follow_pole",
                                    "rgftrans.leads.embedding import lead_self_energies"],
                         ids=["transport", "spectra", "leads"])
def test_a_figure_that_runs_a_solver_breaks_the_contract(tmp_path, solver):
    # The second contract: plots draw what they are handed; a figure importing a solver (even inside a function,
    # where the layers contract alone would allow it) breaks it.
    shutil.copytree(ROOT / "rgftrans", tmp_path / "rgftrans", ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copy(ROOT / "pyproject.toml", tmp_path / "pyproject.toml")
    figures = tmp_path / "rgftrans" / "plots" / "figures.py"
    figures.write_text(figures.read_text() + f"\n\ndef _computes():\n    from {solver}  # noqa: F401\n")
    result = _lint(tmp_path)
    assert result.returncode != 0
    assert f"rgftrans.plots is not allowed to import {solver.split()[0].rsplit('.', 1)[0]}" in result.stdout
    assert "1 kept, 1 broken" in result.stdout


@pytest.mark.slow
def test_a_wheel_holds_every_subpackage(tmp_path):
    # What a non-editable install gets: setuptools must find the subpackages, not only the top package.
    result = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-q",
                             "-w", str(tmp_path), str(ROOT)], capture_output=True, text=True)
    assert result.returncode == 0, result.stderr[-2000:]
    (wheel,) = tmp_path.glob("rgftrans-*.whl")
    names = set(zipfile.ZipFile(wheel).namelist())
    for sub in SUBPACKAGES:
        assert f"rgftrans/{sub}/__init__.py" in names, sub
    assert "rgftrans/transport/_kernels.py" in names and "rgftrans/constants.py" in names


def test_the_command_line_starts_without_the_numerical_stack():
    # The __init__ files re-export lazily: parsing `rgftrans --help` must not import numpy, numba or matplotlib.
    code = "import sys, rgftrans, rgftrans.cli; print(sorted({'numpy', 'numba', 'matplotlib', 'scipy'} & set(sys.modules)))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT)
    assert out.stdout.strip() == "[]", out.stdout + out.stderr


def test_everyday_names_at_the_top():
    import rgftrans as rt

    for name in ("Device", "Lead", "rectangle", "square", "transmission", "transmission_matrix", "ldos",
                 "load_config", "read_result", "RgftransError"):
        assert getattr(rt, name) is not None, name
    with pytest.raises(AttributeError):
        rt.no_such_name  # noqa: B018
    assert "rgftrans.transport" in rt.__doc__ and "rgftrans.system" in rt.__doc__
