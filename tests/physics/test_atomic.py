"""The one atomic writer behind tables, sessions, demo files, batch records and CLI output:
it never replaces a file zline did not write."""

import json
import os
import stat

import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits
from astropy.table import QTable, Table

from zline.physics._atomic import (KINDS, NotZlineFileError, atomic_path, check_replaceable,
                                   describe_file, file_sha256, zline_kind)
from zline.physics.demo import write_demo_spectra
from zline.physics.session import save_session
from zline.physics.tables import write_table


def _write(target, text, **kwargs):
    with atomic_path(target, **kwargs) as tmp, open(tmp, "w") as fh:
        fh.write(text)


def test_publishes_with_ordinary_permissions(tmp_path):
    target = tmp_path / "out.txt"
    _write(target, "hello")
    assert target.read_text() == "hello"
    mask = os.umask(0)
    os.umask(mask)
    assert stat.S_IMODE(target.stat().st_mode) == 0o666 & ~mask  # not the temp file's 0600
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.txt"]


def test_existing_file_kept_without_overwrite(tmp_path):
    target = tmp_path / "out.txt"
    target.write_text("mine")
    with pytest.raises(FileExistsError, match="keep it"):
        _write(target, "new", exists_message="out.txt is there: keep it")
    assert target.read_text() == "mine"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.txt"]


def test_overwrite_needs_a_kind(tmp_path):
    with pytest.raises(TypeError, match="needs kind"):
        _write(tmp_path / "x.json", "{}", overwrite=True)
    with pytest.raises(ValueError, match="unknown kind 'poster'"):
        _write(tmp_path / "x.json", "{}", overwrite=True, kind="poster")


def test_failed_write_leaves_nothing(tmp_path):
    target = tmp_path / "out.txt"
    with pytest.raises(RuntimeError):
        with atomic_path(target) as tmp, open(tmp, "w") as fh:
            fh.write("half")
            raise RuntimeError("disk on fire")
    assert list(tmp_path.iterdir()) == []


def _line_table():
    """The leading columns of `line_table_for_paper` (a CSV is recognised by them)."""
    return QTable({"label": ["Hα"], "species": ["H I"], "rest": [6564.61] * u.AA,
                   "observed": [7000.0] * u.AA, "observed_err": [0.1] * u.AA,
                   "upper_limit": [False]})


@pytest.fixture
def files(tmp_path):
    """One file of every kind zline writes, and some it does not."""
    out = {}
    save_session(tmp_path / "s.json", {"z": 0.1})
    out["session"] = tmp_path / "s.json"
    for fmt, ext in (("ecsv", "ecsv"), ("fits", "fits"), ("csv", "csv"), ("latex", "tex"),
                     ("aastex", "aas.tex")):
        out[f"line-table-{fmt}"] = write_table(_line_table(), tmp_path / f"lines.{ext}",
                                               format=fmt)
    catalog = Table({"file": ["a.fits"], "z": [0.1]})
    catalog.meta["zline_batch"] = {"z_min": 0.0}
    os.makedirs(tmp_path / "cat.ecsv.parts")
    out["catalog"] = write_table(catalog, tmp_path / "cat.ecsv")
    out["demo-spectrum"] = write_demo_spectra(tmp_path / "demo")["galaxy"]
    (tmp_path / "m.txt").write_text("line set    galaxy-emission (vacuum)\nconvention  optical\n")
    out["measure-output"] = tmp_path / "m.txt"
    (tmp_path / "m.json").write_text(json.dumps({"z": 0.1, "z_err": 1e-4, "line_set": "x",
                                                 "convention": "optical", "lines": []}))
    out["measure-output-json"] = tmp_path / "m.json"
    (tmp_path / "rec.json").write_text(json.dumps({"file": "a", "flags": [], "error": ""}))
    out["batch-record"] = tmp_path / "rec.json"
    (tmp_path / "corr.json").write_text(json.dumps([{"file": "a", "z": 0.1, "who": "me"}]))
    out["corrections"] = tmp_path / "corr.json"
    # files zline did not write
    fits.PrimaryHDU(np.ones(10, dtype=np.float32)).writeto(tmp_path / "spec.fits")
    out["foreign-fits"] = tmp_path / "spec.fits"
    Table({"a": [1, 2]}, meta={"author": "someone"}).write(tmp_path / "their.ecsv")
    out["foreign-ecsv"] = tmp_path / "their.ecsv"
    bare = Table({"file": ["a.fits"], "z": [0.1]}, meta={"zline_batch": {"z_min": 0.0}})
    bare.write(tmp_path / "orphan.ecsv")  # a catalogue without its .parts folder
    out["orphan-catalog"] = tmp_path / "orphan.ecsv"
    (tmp_path / "notes.json").write_text('{"format": "other"}')
    out["foreign-json"] = tmp_path / "notes.json"
    (tmp_path / "empty.txt").write_text("")
    out["empty"] = tmp_path / "empty.txt"
    (tmp_path / "paper.tex").write_text("\\begin{table}\\end{table}\n")
    out["foreign-tex"] = tmp_path / "paper.tex"
    return out


def test_kinds_recognised_from_content(files):
    expected = {"session": "session", "catalog": "catalog", "demo-spectrum": "demo-spectrum",
                "measure-output": "measure-output", "measure-output-json": "measure-output",
                "batch-record": "batch-record", "corrections": "corrections"}
    for name, path in files.items():
        if name.startswith("line-table"):
            assert zline_kind(path) == "line-table", name
        elif name in expected:
            assert zline_kind(path) == expected[name], name
        else:
            assert zline_kind(path) is None, name
    assert set(expected.values()) | {"line-table"} == set(KINDS)


@pytest.mark.parametrize("foreign", ["foreign-fits", "foreign-ecsv", "orphan-catalog",
                                     "foreign-json", "empty", "foreign-tex"])
def test_foreign_files_are_never_replaced(files, foreign):
    path = files[foreign]
    before = path.read_bytes()
    for kind in sorted(KINDS):
        with pytest.raises(NotZlineFileError, match="zline replaces only its own files") as info:
            _write(path, "new", overwrite=True, kind=kind)
        assert "\n" not in str(info.value) and os.path.basename(path) in str(info.value)
        assert path.read_bytes() == before
    assert sorted(p.name for p in path.parent.iterdir() if p.name.endswith(".tmp")) == []


def test_other_zline_kind_is_refused(files):
    before = files["session"].read_bytes()
    with pytest.raises(NotZlineFileError, match="is a zline session.*not a zline line table"):
        write_table(_line_table(), files["session"], overwrite=True)
    assert files["session"].read_bytes() == before
    with pytest.raises(NotZlineFileError, match="not a zline session"):
        save_session(files["line-table-ecsv"], {"z": 0.2}, overwrite=True)


def test_same_kind_is_replaced_when_asked(files):
    save_session(files["session"], {"z": 0.3}, overwrite=True)
    assert json.loads(files["session"].read_text())["z"] == 0.3
    for fmt in ("ecsv", "fits", "csv", "latex"):
        write_table(_line_table(), files[f"line-table-{fmt}"], format=fmt, overwrite=True)
        assert zline_kind(files[f"line-table-{fmt}"]) == "line-table"
    _write(files["measure-output"], "line set    x\nconvention  radio\n", overwrite=True,
           kind="measure-output")


def test_directory_and_symlink_are_refused(tmp_path, files):
    (tmp_path / "d").mkdir()
    with pytest.raises(NotZlineFileError, match="is a directory"):
        check_replaceable(tmp_path / "d", "session")
    link = tmp_path / "link.json"
    link.symlink_to(files["session"])
    with pytest.raises(NotZlineFileError):
        check_replaceable(link, "session")
    assert describe_file(files["foreign-fits"]) == "a FITS file zline did not write"


def test_file_sha256_of_bytes_and_file(tmp_path):
    # SHA-256 of the empty string (FIPS 180-4 test vectors, as quoted widely)
    empty = "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
    assert file_sha256(b"") == empty
    (tmp_path / "e").write_bytes(b"")
    assert file_sha256(tmp_path / "e") == empty
