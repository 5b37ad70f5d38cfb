"""The package installs under one import name and runs from outside the repository."""

import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]


def _run_outside(code, tmp_path):
    return subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True,
                          text=True, timeout=120)


def test_subpackages_import_from_outside_repo(tmp_path):
    res = _run_outside(
        "import zline, zline.physics, zline.widgets, zline.cli; print(zline.physics.__name__)",
        tmp_path)
    assert res.returncode == 0, res.stderr
    assert res.stdout.strip() == "zline.physics"


def test_no_bare_top_level_physics_module(tmp_path):
    res = _run_outside("import physics", tmp_path)
    assert res.returncode != 0
    assert "ModuleNotFoundError" in res.stderr
    res = _run_outside("import widgets", tmp_path)
    assert res.returncode != 0


def test_physics_never_imports_widget_libraries(tmp_path):
    code = ("import sys, pkgutil, importlib, zline.physics as p\n"
            "for m in pkgutil.walk_packages(p.__path__, 'zline.physics.'):\n"
            "    importlib.import_module(m.name)\n"
            "bad = sorted(k for k in sys.modules if k.split('.')[0] in {'ipywidgets', 'bqplot'})\n"
            "print(bad)\n")
    res = _run_outside(code, tmp_path)
    assert res.returncode == 0, res.stderr
    assert res.stdout.strip() == "[]"


def test_console_command_reports_version():
    exe = Path(sys.executable).with_name("zline")
    res = subprocess.run([str(exe), "--version"], capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    import zline

    assert res.stdout.strip() == f"zline {zline.__version__}"


@pytest.mark.parametrize("argv", [["no-such-command"], ["--no-such-flag"]])
def test_bad_command_line_is_one_line_not_a_traceback(argv):
    exe = Path(sys.executable).with_name("zline")
    res = subprocess.run([str(exe), *argv], capture_output=True, text=True, timeout=120)
    assert res.returncode == 2
    assert "Traceback" not in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


def test_regular_wheel_install_has_one_import_name(tmp_path):
    """A non-editable wheel holds zline/physics and zline/widgets and no bare top-level package."""
    wheel_dir = tmp_path / "wheel"
    res = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation",
                          "-q", "-w", str(wheel_dir), str(REPO)], capture_output=True, text=True,
                         timeout=300)
    assert res.returncode == 0, res.stderr
    (wheel,) = wheel_dir.glob("zline-*.whl")
    import zipfile

    names = zipfile.ZipFile(wheel).namelist()
    tops = {n.split("/")[0] for n in names if not n.split("/")[0].endswith(".dist-info")}
    assert tops == {"zline"}
    assert "zline/physics/__init__.py" in names
    assert "zline/widgets/__init__.py" in names
    target = tmp_path / "site"
    res = subprocess.run([sys.executable, "-m", "pip", "install", "-q", "--no-deps", "--target",
                          str(target), str(wheel)], capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    code = "import zline.physics, zline.widgets; print(zline.physics.__file__)"
    res = subprocess.run([sys.executable, "-I", "-c", f"import sys; sys.path.insert(0, {str(target)!r}); {code}"],
                         cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    assert res.stdout.strip().startswith(str(target))
