"""Installing as an application: the wheel, the desktop entry, the icon.

The wheel is built from this checkout and installed into a fresh virtual environment that sees the
pinned dependencies of .venv but not the editable install, so the smoke commands run the installed
package exactly as a user of `pipx install` would.
"""

from __future__ import annotations

import configparser
import os
import shutil
import subprocess
import sys
import tomllib
import venv
import xml.etree.ElementTree as ET
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def test_desktop_entry_is_valid():
    # Keys from the freedesktop.org Desktop Entry Specification 1.5.
    cp = configparser.ConfigParser(interpolation=None)
    cp.optionxform = str  # keys are case-sensitive
    cp.read(ROOT / "packaging" / "phasewake.desktop", encoding="utf-8")
    entry = cp["Desktop Entry"]
    assert entry["Type"] == "Application"
    for key in ("Name", "Exec", "Icon", "Categories"):
        assert entry.get(key)
    assert entry["Categories"].endswith(";")
    launcher = entry["Exec"].split()[0]
    scripts = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["gui-scripts"]
    assert launcher in scripts, "the desktop entry must start a launcher the package installs"


def test_icon_is_svg():
    root = ET.parse(ROOT / "packaging" / "phasewake.svg").getroot()
    assert root.tag.endswith("svg")
    assert (ROOT / "app" / "resources" / "phasewake.svg").read_bytes() == (
        ROOT / "packaging" / "phasewake.svg"
    ).read_bytes()


@pytest.mark.slow
def test_wheel_installs_and_runs(tmp_path):
    wheel_dir = tmp_path / "wheels"
    build = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--quiet", "--no-deps", "-w", str(wheel_dir), str(ROOT)],
        capture_output=True, text=True,
    )
    assert build.returncode == 0, build.stderr[-2000:]
    wheels = list(wheel_dir.glob("phasewake-*.whl"))
    assert len(wheels) == 1
    names = zipfile.ZipFile(wheels[0]).namelist()
    assert any(n.startswith("phasewake/core/") for n in names)
    assert any(n.startswith("phasewake/sample_data/") and n.endswith(".h5md") for n in names)
    assert not any(n.startswith(("core/", "app/")) for n in names), "bare core/ or app/ in the wheel"

    env_dir = tmp_path / "env"
    venv.EnvBuilder(with_pip=False).create(env_dir)
    site = next((env_dir / "lib").glob("python3*/site-packages"))
    deps = next((ROOT / ".venv" / "lib").glob("python3*/site-packages")) if (ROOT / ".venv").exists() \
        else Path(next(p for p in sys.path if p.endswith("site-packages")))
    # A plain path line: the dependencies become importable, but .venv's own .pth files (the
    # editable install of this checkout) are not processed.
    (site / "deps.pth").write_text(str(deps) + "\n")
    py = env_dir / "bin" / "python"
    inst = subprocess.run(
        [sys.executable, "-m", "pip", "--python", str(py), "install", "--quiet", "--no-deps", str(wheels[0])],
        capture_output=True, text=True,
    )
    assert inst.returncode == 0, inst.stderr[-2000:]
    exe = env_dir / "bin" / "phasewake"
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH",)}
    env["QT_QPA_PLATFORM"] = "offscreen"
    out = subprocess.run([str(exe), "--version"], capture_output=True, text=True, cwd=tmp_path, env=env)
    assert out.returncode == 0 and "phasewake" in out.stdout, out.stderr
    where = subprocess.run([str(py), "-c", "import phasewake.core as c; print(c.__file__)"],
                           capture_output=True, text=True, cwd=tmp_path, env=env)
    assert str(env_dir) in where.stdout, "the smoke test must run the installed wheel, not the checkout"
    sample = subprocess.run(
        [str(py), "-c", "import importlib.resources as r; print(r.files('phasewake.sample_data') / 'dimer_nve.h5md')"],
        capture_output=True, text=True, cwd=tmp_path, env=env,
    ).stdout.strip()
    desc = subprocess.run([str(exe), "describe", sample], capture_output=True, text=True, cwd=tmp_path, env=env)
    assert desc.returncode == 0, desc.stderr
    assert "atoms" in desc.stdout.lower()
    if shutil.which("true"):
        smoke = subprocess.run([str(exe), "open", "--smoke-test", sample], capture_output=True, text=True,
                               cwd=tmp_path, env=env, timeout=120)
        assert smoke.returncode == 0, smoke.stderr[-2000:]
