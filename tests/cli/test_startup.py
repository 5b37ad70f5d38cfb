"""The ``zline`` dispatcher: sub-commands found without importing them, a light ``--help``."""

import subprocess
import sys

import pytest

from zline.cli import build_parser, commands, main

HEAVY = ("scipy", "specutils", "astropy.table", "astropy.units", "astropy.io.fits",
         "zline.physics")


def _modules_after(argv):
    code = ("import sys\nfrom zline.cli import main\n"
            "try:\n    main(sys.argv[1:])\nexcept SystemExit:\n    pass\n"
            "print('MODULES', ' '.join(sorted(sys.modules)))")
    out = subprocess.run([sys.executable, "-c", code, *argv], capture_output=True, text=True,
                         check=True, timeout=120).stdout
    line = [x for x in out.splitlines() if x.startswith("MODULES ")][-1]
    return set(line.split()[1:]), out


def test_help_imports_no_heavy_module():
    mods, out = _modules_after(["--help"])
    assert "measure" in out and "batch" in out and "info" in out
    loaded = sorted(m for m in mods if any(m == h or m.startswith(h + ".") for h in HEAVY))
    assert loaded == []
    assert not any(m.startswith("zline.cli.") for m in mods - {"zline.cli"})  # none imported


def test_a_command_imports_only_itself():
    mods, out = _modules_after(["lines", "--help"])
    assert "--series" in out
    assert "zline.cli.lines" in mods
    assert not {"zline.cli.batch", "zline.cli.measure", "zline.cli.scan"} & mods


def test_commands_found_from_source():
    found = commands()
    assert {"batch", "demo-data", "info", "lines", "measure", "scan"} <= set(found)
    assert found["batch"][1] == "zline.cli.batch"
    full = build_parser()  # every command's arguments, as before
    assert full.parse_args(["batch", "x", "-o", "c.ecsv", "--retry-failed"]).retry_failed


def test_version_and_no_command(capsys):
    with pytest.raises(SystemExit) as info:
        main(["--version"])
    assert info.value.code == 0
    assert capsys.readouterr().out.startswith("zline ")
    assert main([]) == 2
    assert "COMMAND" in capsys.readouterr().out


def test_python_dash_m():
    run = subprocess.run([sys.executable, "-m", "zline.cli", "--version"], capture_output=True,
                         text=True, timeout=120)
    assert run.returncode == 0 and run.stdout.startswith("zline ")
