"""Star lists (issue 5, item 1): required columns, per-row overrides, pass-through columns, fatal errors."""

from __future__ import annotations

import pytest
from astropy.table import Table

from vsini.errors import InputError, SpectrumFileError
from vsini.starlist import OPTION_COLUMNS, measure_keywords, parse_option, read_starlist

DEFAULTS = {"resolution": 60000.0, "limb_darkening": 0.6, "lines": "fgk-optical", "teff": None, "logg": None,
            "rv": None, "macroturbulence": "free", "method": "both", "mc": 0}


def write(tmp_path, text, name="list.csv"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_overrides_and_defaults(tmp_path):
    path = write(tmp_path, "Star,SPECTRUM,resolution,macroturbulence,lines,limb_darkening,teff,colour\n"
                           "A,a.fits,45000,3.5,5000.1;5002.2,0.4,5800,blue\n"
                           "B,sub/b.csv,,,,0.4 0.25,,red\n"
                           "C,c.fits,,off,a-optical,,,\n")
    sl = read_starlist(path)
    assert len(sl) == 3
    assert sl.extra_columns == ["colour"]
    a, b, c = (sl.task(i, DEFAULTS, seed=7) for i in range(3))
    assert a.options["resolution"] == 45000.0 and a.options["macroturbulence"] == 3.5
    assert a.options["lines"] == "5000.1;5002.2" and a.options["limb_darkening"] == 0.4 and a.options["teff"] == 5800
    assert b.options["resolution"] == 60000.0 and b.options["macroturbulence"] == "free"
    assert b.options["lines"] == "fgk-optical" and b.options["limb_darkening"] == "0.4 0.25"
    assert c.options["macroturbulence"] == "off" and measure_keywords(c.options)["macroturbulence"] is None
    assert a.spectrum == str(tmp_path.resolve() / "a.fits")
    assert b.spectrum == str(tmp_path.resolve() / "sub" / "b.csv")
    assert (a.seed, c.seed) == ((7, 0), (7, 2))
    assert not (a.problem or b.problem or c.problem)
    assert sl.inputs(0)["colour"] == "blue"


def test_ecsv_star_list(tmp_path):
    t = Table({"star": ["X"], "spectrum": ["x.fits"], "rv": [12.5]})
    t.write(tmp_path / "list.ecsv", format="ascii.ecsv")
    task = read_starlist(tmp_path / "list.ecsv").task(0, DEFAULTS)
    assert task.options["rv"] == 12.5


def test_row_problems_are_not_fatal(tmp_path):
    path = write(tmp_path, "star,spectrum,resolution,macroturbulence\n"
                           ",a.fits,abc,\n"
                           "B,,,windy\n")
    sl = read_starlist(path)
    first, second = sl.task(0, DEFAULTS), sl.task(1, DEFAULTS)
    assert first.star == "row 1"
    assert "resolution = 'abc' is not a number" in first.problem
    assert "no spectrum file given" in second.problem and "macroturbulence = 'windy'" in second.problem


@pytest.mark.parametrize(
    "text, match",
    [
        ("star,file\nA,a.fits\n", "no column 'spectrum'"),
        ("name,spectrum\nA,a.fits\n", "no column 'star'"),
        ("star,spectrum\n", "has a header but no rows"),
        ("star,spectrum,Star\nA,a,b\n", "column 'star' twice"),
        ("star,spectrum\nA,a.fits,extra,more\nB\n", "cannot be read"),
    ],
)
def test_fatal_star_list_errors(tmp_path, text, match):
    with pytest.raises(SpectrumFileError, match=match):
        read_starlist(write(tmp_path, text))


def test_missing_empty_and_directory(tmp_path):
    with pytest.raises(SpectrumFileError, match="star list not found"):
        read_starlist(tmp_path / "nope.csv")
    with pytest.raises(SpectrumFileError, match="star list is empty"):
        read_starlist(write(tmp_path, ""))
    with pytest.raises(SpectrumFileError, match="is a directory"):
        read_starlist(tmp_path)
    ecsv = tmp_path / "list.ecsv"
    ecsv.write_text("star,spectrum\nA,a.fits\n")
    with pytest.raises(SpectrumFileError, match="not a valid ECSV table"):
        read_starlist(ecsv)
    binary = tmp_path / "binary.csv"
    binary.write_bytes(b"star,spectrum\n\xff\xfe\x00\x81,\x90\n")
    with pytest.raises(SpectrumFileError, match="cannot be read"):
        read_starlist(binary)


@pytest.mark.parametrize(
    "name, value, expected",
    [
        ("resolution", "60000", 60000.0),
        ("resolution", "", None),
        ("teff", 5800, 5800.0),
        ("rv", "-12.5", -12.5),
        ("limb_darkening", "0.6", 0.6),
        ("limb_darkening", "0.4,0.25", "0.4,0.25"),
        ("lines", 5000.5, "5000.5"),
        ("macroturbulence", "FREE", "free"),
        ("macroturbulence", "none", "off"),
        ("macroturbulence", "4", 4.0),
        ("macroturbulence", None, None),
        ("logg", float("nan"), None),
    ],
)
def test_parse_option(name, value, expected):
    assert parse_option(name, value) == expected


@pytest.mark.parametrize(
    "name, value, match",
    [
        ("resolution", "x", "is not a number"),
        ("resolution", "-5", "must be positive"),
        ("rv", "inf", "is not finite"),
        ("macroturbulence", "-1", "must be >= 0"),
        ("macroturbulence", "gusty", "use 'free', 'off'"),
        ("colour", "red", "not a star-list option"),
    ],
)
def test_parse_option_errors(name, value, match):
    with pytest.raises(ValueError, match=match):
        parse_option(name, value)


def test_option_columns_are_measure_star_keywords():
    """Every option column is a keyword of measure_star (the survey passes them straight through)."""
    import inspect

    from vsini.compare import measure_star

    params = inspect.signature(measure_star).parameters
    assert all(name in params for name in OPTION_COLUMNS)
    assert issubclass(SpectrumFileError, InputError)
