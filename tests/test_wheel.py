"""The built wheel carries its data and runs the demo from outside the checkout."""

import os
import subprocess
import sys
import venv
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.slow
def test_wheel_installs_and_runs_demo(tmp_path):
    dist = tmp_path / "dist"
    subprocess.run([sys.executable, "-m", "build", "--wheel", "--outdir", str(dist), str(ROOT)], check=True,
                   capture_output=True, text=True)
    wheel = next(dist.glob("histosol-*.whl"))
    env_dir = tmp_path / "venv"
    # System site packages hold the dependencies already installed for the tests, so nothing is
    # downloaded; the wheel's own package in the fresh environment shadows any editable install.
    venv.EnvBuilder(with_pip=True, system_site_packages=True).create(env_dir)
    python = env_dir / "bin" / "python"
    subprocess.run([str(python), "-m", "pip", "install", "--quiet", "--no-deps", str(wheel)], check=True)
    work = tmp_path / "elsewhere"
    work.mkdir()
    clean_env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH",)}
    where = subprocess.run([str(python), "-c", "import compiler, compiler.resources as r; "
                            "print(compiler.__file__); print(r.resource_dir('factor_tables'))"],
                           cwd=work, capture_output=True, text=True, check=True, env=clean_env).stdout.split()
    assert str(env_dir) in where[0] and str(env_dir) in where[1], where
    proc = subprocess.run([str(env_dir / "bin" / "histosol"), "demo", "--out", "out"], cwd=work,
                          capture_output=True, text=True, env=clean_env)
    assert proc.returncode == 0, proc.stderr
    for name in ("emissions.csv", "datapackage.json", "inventory.xlsx", "manifest.json"):
        assert (work / "out" / name).exists(), name
