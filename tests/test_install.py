"""The package installs as one namespace, editable and from a wheel.

diagnostics/ and resample/ sit at the top level of the repository but must
import as famwise.diagnostics and famwise.resample (pyproject.toml maps them).
"""

import os
import pathlib
import subprocess
import sys
import zipfile

import pytest

import famwise

REPO = pathlib.Path(__file__).resolve().parents[1]
CHECK = ("import famwise, famwise.diagnostics, famwise.resample, famwise.report, os; "
         "print(os.path.dirname(famwise.__file__)); "
         "print(os.path.dirname(famwise.diagnostics.__file__)); "
         "print(os.path.dirname(famwise.resample.__file__))")


def test_editable_install_maps_the_top_level_folders():
    out = subprocess.run([sys.executable, "-c", CHECK], capture_output=True, text=True,
                         check=True, cwd="/").stdout.split()
    assert out == [str(REPO / "famwise"), str(REPO / "diagnostics"), str(REPO / "resample")]


def test_wheel_installs_all_three(tmp_path):
    if not (REPO / "pyproject.toml").exists():
        pytest.skip("not running from a source tree")
    wheels = tmp_path / "wheels"
    subprocess.run([sys.executable, "-m", "pip", "wheel", str(REPO), "--no-deps",
                    "--no-build-isolation", "-q", "-w", str(wheels)],
                   check=True, capture_output=True, cwd=tmp_path, timeout=300)
    (wheel,) = wheels.glob("famwise-*.whl")
    names = zipfile.ZipFile(wheel).namelist()
    assert "famwise/diagnostics/__init__.py" in names
    assert "famwise/resample/__init__.py" in names
    assert not any(n.startswith(("diagnostics/", "resample/", "tests/")) for n in names)
    target = tmp_path / "site"
    subprocess.run([sys.executable, "-m", "pip", "install", "--no-deps", "-q",
                    "--target", str(target), str(wheel)], check=True, capture_output=True,
                   timeout=300)
    env = dict(os.environ, PYTHONPATH=str(target))
    out = subprocess.run([sys.executable, "-c", CHECK], capture_output=True, text=True,
                         check=True, env=env, cwd=tmp_path).stdout.split()
    assert out == [str(target / "famwise"), str(target / "famwise" / "diagnostics"),
                   str(target / "famwise" / "resample")]


def test_version_is_reported():
    proc = subprocess.run([sys.executable, "-m", "famwise", "--version"], capture_output=True,
                          text=True, check=True)
    assert proc.stdout.strip() == f"famwise {famwise.__version__}"
