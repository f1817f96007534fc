"""A plain install works anywhere: the wheel holds one top-level package, `tuikiln`, with the
example profiles and register maps inside, and a non-editable install runs from another
folder (no source tree on the path).

The wheel is built offline from a copy of the tree (pip wheel --no-build-isolation with this
venv's setuptools, so a stale build/ folder cannot leak into it). The install goes into a
fresh venv that borrows this venv's site-packages for the dependencies through a .pth line,
so nothing is downloaded; such a line adds a folder without running its .pth files, so the
editable install of this venv stays out of it.
"""

from __future__ import annotations

import importlib.metadata
import os
import shutil
import subprocess
import sys
import sysconfig
import tomllib
import venv
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
# Where each source folder lands in the package (pyproject.toml, [tool.setuptools] package-dir).
MAPPED = {"tuikiln": "tuikiln", "drivers": "tuikiln/drivers", "simulator": "tuikiln/simulator",
          "profiles": "tuikiln/profiles"}
SKIP_DIRS = {".venv", ".git", "build", "dist", "__pycache__", ".pytest_cache", ".ruff_cache",
             ".hypothesis"}


def setuptools_problem() -> str | None:
    """Why this machine cannot build the wheel offline, or None."""
    try:
        version = importlib.metadata.version("setuptools")
    except importlib.metadata.PackageNotFoundError:
        return "setuptools is not installed in this venv (pip install -e '.[test]' brings it)"
    major = int(version.split(".")[0])
    if major < 77:  # SPDX `license = "MIT"` and a built-in bdist_wheel need 77+
        return f"setuptools {version} is too old to build offline (pip install -e '.[test]')"
    return None


def copy_tree(dest: Path) -> Path:
    def ignore(folder: str, names: list[str]) -> set[str]:
        return {n for n in names if n in SKIP_DIRS or n.endswith(".egg-info")}

    shutil.copytree(ROOT, dest, ignore=ignore)
    return dest


@pytest.fixture(scope="module")
def wheel(tmp_path_factory: pytest.TempPathFactory) -> Path:
    problem = setuptools_problem()
    if problem:
        pytest.skip(problem)
    base = tmp_path_factory.mktemp("wheel")
    src = copy_tree(base / "src")
    out = base / "dist"
    done = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "-q", "--no-deps", "--no-build-isolation",
         "--no-index", "-w", str(out), str(src)],
        capture_output=True, text=True)
    assert done.returncode == 0, done.stderr[-3000:]
    (path,) = out.glob("tuikiln-*.whl")
    return path


def wheel_names(wheel: Path) -> list[str]:
    with zipfile.ZipFile(wheel) as zf:
        return zf.namelist()


def test_the_wheel_has_one_top_level_package(wheel: Path) -> None:
    tops = {name.split("/")[0] for name in wheel_names(wheel)}
    dist_info = {t for t in tops if t.endswith(".dist-info")}
    assert tops - dist_info == {"tuikiln"}, sorted(tops)
    with zipfile.ZipFile(wheel) as zf:
        (top_level,) = [n for n in zf.namelist() if n.endswith(".dist-info/top_level.txt")]
        assert zf.read(top_level).decode().split() == ["tuikiln"]


def test_the_wheel_carries_every_module_profile_and_map(wheel: Path) -> None:
    """Every source file lands where package-dir maps it: a subpackage missing from the
    hand-written `packages` list, or a data file missing from package-data, fails here."""
    names = set(wheel_names(wheel))
    expected: list[str] = []
    for folder, target in MAPPED.items():
        for path in sorted((ROOT / folder).rglob("*")):
            rel = path.relative_to(ROOT / folder)
            if path.is_dir() or "__pycache__" in rel.parts:
                continue
            if path.suffix in (".py", ".toml", ".tcss", ".service"):
                expected.append(f"{target}/{rel.as_posix()}")
    missing = [name for name in expected if name not in names]
    assert not missing, missing
    # The two data sets the issue is about, named outright.
    assert "tuikiln/profiles/demo-harden-temper.toml" in names
    assert "tuikiln/drivers/maps/generic-pid.toml" in names


def test_the_wheel_says_its_license_and_one_version(wheel: Path) -> None:
    """pyproject takes the version from tuikiln/__init__.py; the license is an SPDX
    expression (PEP 639: License-Expression) with the MIT text shipped beside it."""
    namespace: dict[str, object] = {}
    exec((ROOT / "tuikiln" / "__init__.py").read_text(encoding="utf-8"), namespace)
    version = namespace["__version__"]
    assert wheel.name.startswith(f"tuikiln-{version}-"), wheel.name
    with zipfile.ZipFile(wheel) as zf:
        names = zf.namelist()
        (meta,) = [n for n in names if n.endswith(".dist-info/METADATA")]
        headers = zf.read(meta).decode("utf-8").split("\n\n")[0].splitlines()
        assert f"Version: {version}" in headers
        assert "License-Expression: MIT" in headers
        (licence,) = [n for n in names if n.endswith(".dist-info/licenses/LICENSE")]
        assert zf.read(licence).decode("utf-8").startswith("MIT License")


def test_the_package_list_names_every_subpackage() -> None:
    """Without a wheel: pyproject's `packages` against the folders with an __init__.py."""
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    listed = set(config["tool"]["setuptools"]["packages"])
    on_disk = set()
    for folder, target in MAPPED.items():
        for init in (ROOT / folder).rglob("__init__.py"):
            rel = init.parent.relative_to(ROOT / folder)
            on_disk.add(".".join([*target.split("/"), *rel.parts]))
    assert on_disk - listed == set(), "add these to [tool.setuptools] packages"


@pytest.fixture(scope="module")
def installed(wheel: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A fresh venv with the wheel installed (not editable); returns its bin folder."""
    env_dir = tmp_path_factory.mktemp("venv") / "v"
    venv.create(env_dir, with_pip=False)
    bin_dir = env_dir / "bin"
    site = Path(subprocess.run(
        [str(bin_dir / "python"), "-c", "import sysconfig; print(sysconfig.get_path('purelib'))"],
        capture_output=True, text=True, check=True).stdout.strip())
    # The dependencies come from this venv, after the fresh venv's own site-packages.
    (site / "borrowed-deps.pth").write_text(sysconfig.get_path("purelib") + "\n")
    done = subprocess.run(
        [sys.executable, "-m", "pip", "--python", str(bin_dir / "python"), "install", "-q",
         "--no-deps", "--no-index", str(wheel)],
        capture_output=True, text=True)
    assert done.returncode == 0, done.stderr[-3000:]
    assert not (site / "drivers").exists() and not (site / "simulator").exists()
    return bin_dir


def run_elsewhere(bin_dir: Path, tmp: Path, *argv: str) -> subprocess.CompletedProcess[str]:
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV")}
    # No user profiles and no ./profiles: only what the package carries can be found.
    env["XDG_CONFIG_HOME"] = str(tmp / "config")
    env["XDG_DATA_HOME"] = str(tmp / "data")
    return subprocess.run(list(argv), cwd=tmp, env=env, capture_output=True, text=True,
                          timeout=120)


def test_a_plain_install_lists_and_checks_its_profiles_from_another_folder(
        installed: Path, tmp_path: Path) -> None:
    listing = run_elsewhere(installed, tmp_path, str(installed / "python"), "-c",
                            "import tuikiln, tuikiln.drivers, tuikiln.simulator\n"
                            "from tuikiln.ui.launcher import find_profiles\n"
                            "print(tuikiln.__file__)\n"
                            "for p in find_profiles(): print(p)\n")
    assert listing.returncode == 0, listing.stderr
    where, *profiles = listing.stdout.split()
    assert Path(where).is_relative_to(installed.parent), where  # not the source tree
    names = sorted(Path(p).name for p in profiles)
    assert names == sorted(p.name for p in (ROOT / "profiles").glob("*.toml"))
    assert all(Path(p).is_relative_to(installed.parent) for p in profiles)

    demo = next(p for p in profiles if p.endswith("demo-harden-temper.toml"))
    check = run_elsewhere(installed, tmp_path, str(installed / "tuikiln"), "check", demo)
    assert check.returncode == 0, check.stderr
    assert check.stdout.startswith(f"{demo}: ok:"), check.stdout

    helps = run_elsewhere(installed, tmp_path, str(installed / "tuikiln"), "demo", "--help")
    assert helps.returncode == 0 and "usage: tuikiln demo" in helps.stdout, helps.stderr


def test_a_plain_install_has_no_bare_drivers_or_simulator(installed: Path,
                                                          tmp_path: Path) -> None:
    for name in ("drivers", "simulator"):
        done = run_elsewhere(installed, tmp_path, str(installed / "python"), "-c",
                             f"import {name}")
        assert done.returncode != 0 and "ModuleNotFoundError" in done.stderr, (name, done)
