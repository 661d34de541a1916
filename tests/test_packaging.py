"""The package as users install it: pyproject's dependencies in step with requirements.txt,
and `pip install` into a fresh virtual environment giving a console command that works from
any folder."""

from __future__ import annotations

import json
import shutil
import site
import subprocess
import sys
import tomllib
from pathlib import Path

import pytest
from packaging.requirements import Requirement
from packaging.version import Version

from analysis.cli import COMMAND_NAME

ROOT = Path(__file__).resolve().parents[1]
PYPROJECT = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
TABLE = ROOT / "sample_tables" / "lattice_polygons.csv"


def _requirements_file(path: Path) -> dict[str, Requirement]:
    found = {}
    for line in path.read_text(encoding="utf-8").splitlines():
        text = line.split("#", 1)[0].strip()
        if text:
            requirement = Requirement(text)
            found[requirement.name.lower()] = requirement
    return found


def _as_dict(specs: list[str]) -> dict[str, Requirement]:
    return {Requirement(s).name.lower(): Requirement(s) for s in specs}


def test_pyproject_dependencies_are_requirements_txt():
    listed = _requirements_file(ROOT / "requirements.txt")
    project = PYPROJECT["project"]
    declared = _as_dict(project["dependencies"])
    declared.update(_as_dict(project["optional-dependencies"]["app"]))
    assert sorted(declared) == sorted(listed), "the same packages in both files"
    for name, requirement in listed.items():
        other = declared[name]
        assert (other.specifier, other.extras) == (requirement.specifier, requirement.extras), \
            f"{name}: requirements.txt says {requirement}, pyproject.toml says {other}"


def test_the_backend_needs_no_streamlit_and_the_app_extra_names_it():
    names = _as_dict(PYPROJECT["project"]["dependencies"])
    assert "streamlit" not in names
    assert "streamlit" in _as_dict(PYPROJECT["project"]["optional-dependencies"]["app"])


def test_installed_versions_meet_the_lower_bounds():
    # a lower bound is what the tests run on: the installed version must satisfy every bound
    from importlib.metadata import version

    for name, requirement in _requirements_file(ROOT / "requirements.txt").items():
        installed = Version(version(name))
        assert requirement.specifier.contains(installed, prereleases=True), \
            f"{name} {installed} is installed, but requirements.txt asks for {requirement}"


def test_the_console_command_is_the_command_line():
    scripts = PYPROJECT["project"]["scripts"]
    assert scripts == {COMMAND_NAME: "analysis.cli:main"}


def _copy_source(folder: Path) -> Path:
    """The files a source distribution holds, so the install never writes into the checkout."""
    source = folder / "source"
    source.mkdir()
    for name in ("pyproject.toml", "README.md"):
        shutil.copyfile(ROOT / name, source / name)
    shutil.copytree(ROOT / "analysis", source / "analysis",
                    ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))
    return source


@pytest.mark.slow
@pytest.mark.parametrize("editable", [False, True], ids=["install", "editable"])
def test_install_into_a_fresh_venv_and_run_the_command_elsewhere(tmp_path, editable):
    source = _copy_source(tmp_path)
    venv = tmp_path / "venv"
    # the heavy dependencies (numpy, scikit-learn, ...) are found among the installed ones,
    # and pip itself too, so nothing is downloaded
    subprocess.run([sys.executable, "-m", "venv", "--system-site-packages", "--without-pip",
                    str(venv)], check=True)
    python = venv / "bin" / "python"
    if sys.prefix != sys.base_prefix:
        # these tests run inside a venv themselves: its packages are the "installed ones"
        inner = subprocess.run([str(python), "-c", "import site; print(site.getsitepackages()[0])"],
                               capture_output=True, text=True, check=True).stdout.strip()
        Path(inner, "outer-venv.pth").write_text("\n".join(site.getsitepackages()) + "\n")
    install = [str(python), "-m", "pip", "install", "--quiet", "--no-deps", "--no-index",
               "--no-build-isolation"] + (["-e"] if editable else []) + [str(source)]
    done = subprocess.run(install, capture_output=True, text=True, cwd=tmp_path)
    assert done.returncode == 0, done.stderr[-3000:]

    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    where = subprocess.run([str(python), "-c", "import analysis; print(analysis.__file__)"],
                           capture_output=True, text=True, cwd=elsewhere, check=True)
    expected_home = source if editable else venv
    assert Path(where.stdout.strip()).is_relative_to(expected_home), where.stdout

    command = venv / "bin" / COMMAND_NAME
    out = elsewhere / "relations.json"
    done = subprocess.run([str(command), "relations", str(TABLE), "--json", str(out)],
                          capture_output=True, text=True, cwd=elsewhere, timeout=300)
    assert done.returncode == 0, done.stderr[-3000:]
    texts = [r["text"] for r in json.loads(out.read_text(encoding="utf-8"))["relations"]]
    # Pick's theorem, A = I + B/2 - 1, written with twice the area
    assert "twice_area - 2*interior_points - boundary_points = -2" in texts, texts

    helped = subprocess.run([str(command), "--help"], capture_output=True, text=True,
                            cwd=elsewhere, check=True)
    assert helped.stdout.startswith(f"usage: {COMMAND_NAME} "), helped.stdout[:200]
    same = subprocess.run([str(python), "-m", "analysis", "inspect", str(TABLE)],
                          capture_output=True, text=True, cwd=elsewhere, check=True)
    by_command = subprocess.run([str(command), "inspect", str(TABLE)], capture_output=True,
                                text=True, cwd=elsewhere, check=True)
    assert by_command.stdout == same.stdout and "3000 rows" in same.stdout, same.stdout[:300]

    bad = subprocess.run([str(command), "inspect", str(elsewhere / "missing.csv")],
                         capture_output=True, text=True, cwd=elsewhere)
    assert bad.returncode == 2 and "no such file" in bad.stderr, bad.stderr
