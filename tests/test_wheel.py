"""The built wheel carries its data and runs the demo from outside the checkout."""

import os
import subprocess
import sys
import sysconfig
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
    # The dependencies come from the environment running the tests (a path file appends its site-packages
    # to the new environment's path), so nothing is downloaded. The wheel's own package, installed into the
    # new environment's site-packages, comes first on the path; path files of the test environment (such as
    # an editable install of this project) are not processed from an appended directory.
    venv.EnvBuilder(with_pip=True).create(env_dir)
    python = env_dir / "bin" / "python"
    site_dir = subprocess.run([str(python), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                              check=True, capture_output=True, text=True).stdout.strip()
    outer = {sysconfig.get_paths()["purelib"], sysconfig.get_paths()["platlib"]}
    (Path(site_dir) / "test-environment.pth").write_text("\n".join(sorted(outer)) + "\n")
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
