"""Tests of zline.physics.session: versioned JSON sessions, validation, atomic writes."""

import hashlib
import json
import math

import astropy.units as u
import numpy as np
import pytest
from astropy.nddata import StdDevUncertainty
from specutils import Spectrum

from zline.physics.fitting import fit_line
from zline.physics.identify import Identifications, Lock, solve_redshift
from zline.physics._atomic import NotZlineFileError
from zline.physics.session import (SessionFormatError, SessionSourceError, check_source,
                                   load_session, save_session, source_settings)


def _state():
    x = np.linspace(6600.0, 6700.0, 201)
    y = 1 + 30 * np.exp(-0.5 * ((x - 6650.0) / 2.0) ** 2)
    sp = Spectrum(flux=y * u.Jy, spectral_axis=x * u.AA,
                  uncertainty=StdDevUncertainty(np.full(x.size, 0.1)))
    fit = fit_line(sp, 6650 * u.AA, label="H I 3-2")
    locks = Identifications([
        Lock("H I 3-2", 6564.614 * u.AA, fit.center, fit.center_err, species="H I",
             note="clean", fit=fit),
        Lock("H I 4-2", 4862.721 * u.AA, 4862.721 * 1.01299 * u.AA, 0.05 * u.AA,
             species="H I"),
        Lock("HI21", 1420.405751768 * u.MHz, 1402.2 * u.MHz, 5 * u.kHz, species="H I",
             medium="vacuum"),
    ])
    sol = solve_redshift(list(locks)[:2])
    return {"locks": locks, "fits": [fit], "z": sol,
            "settings": {"z_trial": 0.013, "velocity": 120 * u.km / u.s, "model": "qed",
                         "window": [6600, 6700] * u.AA, "flags": [True, False]},
            "spectrum": "object-17.fits"}


def test_roundtrip(tmp_path):
    state = _state()
    path = save_session(tmp_path / "s.json", state)
    raw = json.loads(path.read_text())
    assert raw["format"] == "zline-session" and raw["version"] == 1
    assert raw["locks"][0]["rest"] == {"value": 6564.614, "unit": "Angstrom"}
    back = load_session(path)
    assert [lk.label for lk in back["locks"]] == state["locks"].labels
    for a, b in zip(back["locks"], state["locks"]):
        assert a == b  # fit is not compared (measurement output)
        assert a.rest.unit == b.rest.unit
    assert back["locks"][2].rest.unit == u.MHz
    assert back["fits"][0]["flux"]["value"] == pytest.approx(state["fits"][0].flux.value)
    assert back["z"]["z"] == pytest.approx(state["z"].z, rel=1e-15)
    assert math.isnan(state["z"].chi2_dof) or back["z"]["chi2_dof"] is not None
    s = back["settings"]
    assert s["velocity"] == 120 * u.km / u.s and s["model"] == "qed"
    assert np.all(s["window"] == [6600, 6700] * u.AA) and s["flags"] == [True, False]
    assert back["spectrum"] == "object-17.fits"
    # a re-solve from the loaded locks agrees with the saved solution
    assert solve_redshift(back["locks"][:2]).z == pytest.approx(back["z"]["z"], rel=1e-14)


def test_nan_stored_as_null(tmp_path):
    sol = solve_redshift([Lock("a", 5000 * u.AA, 5100 * u.AA, 0.1 * u.AA)])
    assert math.isnan(sol.chi2_dof)
    path = save_session(tmp_path / "one.json", {"z": sol})
    assert json.loads(path.read_text())["z"]["chi2_dof"] is None  # strict JSON, no NaN
    assert load_session(path)["z"]["chi2_dof"] is None


def test_never_overwrites_without_flag(tmp_path):
    path = tmp_path / "s.json"
    save_session(path, {"z": 0.1})
    with pytest.raises(FileExistsError, match=r"s.json' exists; pass overwrite=True"):
        save_session(path, {"z": 0.2})
    assert load_session(path)["z"] == 0.1
    save_session(path, {"z": 0.2}, overwrite=True)
    assert load_session(path)["z"] == 0.2
    # no temporary files left behind
    assert sorted(p.name for p in tmp_path.iterdir()) == ["s.json"]


@pytest.mark.parametrize("name, content", [
    ("spec.fits", b"SIMPLE  =                    T" + b" " * 2850),
    ("lines.ecsv", b"# %ECSV 1.0\n# ---\n# datatype:\n# - {name: a, datatype: int64}\na\n1\n"),
    ("notes.json", b'{"format": "somebody-else", "version": 1}'),
    ("notebook.ipynb", b'{"cells": [], "nbformat": 4}'),
])
def test_overwrite_refuses_what_zline_did_not_write(tmp_path, name, content):
    path = tmp_path / name
    path.write_bytes(content)
    with pytest.raises(NotZlineFileError, match=f"{name}' exists and is .*not a zline session"):
        save_session(path, {"z": 0.1}, overwrite=True)
    assert path.read_bytes() == content
    assert sorted(p.name for p in tmp_path.iterdir()) == [name]


def test_upload_source_recorded_and_checked(tmp_path):
    upload = b"SIMPLE  = T  invented upload bytes"
    settings = source_settings(upload, name="galaxy.fits")
    path = save_session(tmp_path / "s.json", {"z": 0.1, "settings": settings,
                                              "spectrum": None})
    doc = load_session(path)
    assert doc["settings"]["source_name"] == "galaxy.fits"
    assert doc["settings"]["source_sha256"] == settings["source_sha256"]
    check_source(doc, upload)  # the same bytes: fine
    (tmp_path / "galaxy.fits").write_bytes(upload)
    check_source(doc, tmp_path / "galaxy.fits")  # the same bytes in a file: fine
    other = tmp_path / "sub" / "galaxy.fits"  # same name, other content
    other.parent.mkdir()
    other.write_bytes(upload + b" changed")
    with pytest.raises(SessionSourceError, match=r"saved on 'galaxy.fits' \(SHA-256 [0-9a-f]{12}"
                       r"\.\.\.\), but '.*sub/galaxy.fits' has SHA-256 .*a different file"):
        check_source(doc, other, session=path)
    with pytest.raises(FileNotFoundError, match="nothere.fits"):
        check_source(doc, tmp_path / "nothere.fits")
    check_source({"settings": {}}, other)  # an older session without a digest: not checked
    assert source_settings(other) == {
        "source_name": "galaxy.fits",
        "source_sha256": hashlib.sha256(upload + b" changed").hexdigest()}


def test_bad_source_digest_is_refused(tmp_path):
    with pytest.raises(ValueError, match="source_sha256': expected 64 lower-case hex digits"):
        save_session(tmp_path / "s.json", {"settings": {"source_sha256": "abc"}})
    path = tmp_path / "t.json"
    path.write_text(json.dumps({"format": "zline-session", "version": 1,
                                "settings": {"source_name": 3}}))
    with pytest.raises(SessionFormatError, match="source_name': expected the upload's file name"):
        load_session(path)


def test_failed_encoding_leaves_old_file(tmp_path):
    path = tmp_path / "s.json"
    save_session(path, {"z": 0.1})
    with pytest.raises(TypeError, match=r"settings.bad holds a object"):
        save_session(path, {"settings": {"bad": object()}}, overwrite=True)
    assert load_session(path)["z"] == 0.1
    with pytest.raises(ValueError, match=r"unknown state keys \['zz'\]; expected some of: fits"):
        save_session(tmp_path / "t.json", {"zz": 1})


@pytest.mark.parametrize("content, match", [
    ("{not json", r"not valid JSON \(.* at line 1, column 2\)"),
    ("[1, 2]", r"key '\(top level\)': expected a JSON object, found 'list'"),
    ('{"format": "other", "version": 1}', r"key 'format': expected 'zline-session', found 'other'"),
    ('{"format": "zline-session", "version": "1"}', r"key 'version': expected an integer, found '1'"),
    ('{"format": "zline-session", "version": 7}', r"key 'version': expected at most 1 .* newer"),
    ('{"format": "zline-session", "version": 1, "locks": {}}',
     r"key 'locks': expected a list of lock objects, found \{\}"),
    ('{"format": "zline-session", "version": 1, "locks": [{"label": "a", "rest": 5000, '
     '"observed": {"value": 1, "unit": "AA"}, "observed_err": {"value": 1, "unit": "AA"}}]}',
     r"key 'locks\[0\].rest': expected \{'value': number, 'unit': string\}, found 5000"),
    ('{"format": "zline-session", "version": 1, "locks": [{"label": "a", '
     '"rest": {"value": 1, "unit": "AA"}, "observed": {"value": 1, "unit": "s"}, '
     '"observed_err": {"value": 1, "unit": "AA"}}]}',
     r"key 'locks\[0\]': Lock 'a': 'observed' has unit s"),
    ('{"format": "zline-session", "version": 1, "settings": {"w": {"quantity": 1, "unit": "bogus"}}}',
     r"key 'settings.w.unit': expected a unit string, found 'bogus'"),
    ('{"format": "zline-session", "version": 1, "extra": 1}', r"key 'extra': expected only the keys"),
    ('{"format": "zline-session", "version": 1, "z": "0.1"}', r"key 'z': expected null, a number"),
])
def test_corrupt_files(tmp_path, content, match):
    path = tmp_path / "bad.json"
    path.write_text(content)
    with pytest.raises(SessionFormatError, match=r"session file '.*bad.json': " + match):
        load_session(path)


def test_binary_and_missing(tmp_path):
    path = tmp_path / "bin.json"
    path.write_bytes(b"\xff\xfe\x00garbage")
    with pytest.raises(SessionFormatError, match=r"bin.json': not UTF-8"):
        load_session(path)
    with pytest.raises(FileNotFoundError, match=r"no session file '.*nope.json'"):
        load_session(tmp_path / "nope.json")


def test_is_plain_json_no_code(tmp_path):
    """A file with a Python expression where a number belongs is rejected, not evaluated."""
    path = tmp_path / "evil.json"
    path.write_text('{"format": "zline-session", "version": 1, "z": "__import__(\'os\')"}')
    with pytest.raises(SessionFormatError, match=r"key 'z'"):
        load_session(path)
