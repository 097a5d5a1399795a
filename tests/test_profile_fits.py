"""Folded profiles as FITS (our own layout, timingkit.formats.profile_fits):
the same simulated profiles give the same TOAs from FITS as from .npz, the
content survives a round trip through astropy.io.fits, and bad files exit 2
naming the HDU and the keyword or column (invented source and site)."""

import os

import numpy as np
import pytest
from astropy.io import fits

from timingkit.cli.main import main
from timingkit.formats.errors import InputError
from timingkit.formats.profile_file import (ProfileSet, read_profile_file, read_profile_sets,
                                            read_template_file, write_template_file)
from timingkit.formats.profile_fits import write_profile_fits
from timingkit.formats.toa_reader import read_toa_table
from timingkit.profiles.templates import builtin_template

SAMPLE = os.path.join(os.path.dirname(__file__), "..", "timingkit", "sample_data")


def _set(rng, site="desert-dish", ref=("60000.5", "60000.5104166666666667")):
    return ProfileSet(site=site, source="invented-fits", centre_freq_mhz=1400.0,
                      dedispersion_dm=10.0, channel_freq_mhz=[1350.0, 1450.0],
                      reference_mjd=list(ref), folding_frequency_hz=[100.25, 100.25],
                      data=rng.normal(size=(2, 2, 64)).astype(np.float32),
                      duration_s=[300.0, 300.0],
                      simulated_shift_cycles=rng.uniform(-0.5, 0.5, (2, 2)))


def test_round_trip_keeps_everything(tmp_path):
    rng = np.random.default_rng(4)
    ps = _set(rng)
    path = tmp_path / "obs.fits"
    write_profile_fits([ps], str(path))
    back = read_profile_file(str(path))
    assert back.data.dtype == float and np.array_equal(back.data, ps.data.astype(float))
    assert back.site == "desert-dish" and back.source == "invented-fits"
    assert list(back.reference_mjd) == list(ps.reference_mjd)
    assert (back.reference_day[1], back.reference_frac[1]) == (ps.reference_day[1],
                                                               ps.reference_frac[1])
    for key in ("channel_freq_mhz", "folding_frequency_hz", "duration_s",
                "simulated_shift_cycles"):
        assert np.array_equal(getattr(back, key), getattr(ps, key)), key
    assert (back.centre_freq_mhz, back.dedispersion_dm) == (1400.0, 10.0)
    # the layout as an independent reader (astropy.io.fits) sees it
    with fits.open(path) as hdul:
        hdu = hdul["PROFILES"]
        assert hdu.header["SITENAME"] == "desert-dish" and hdu.header["CENTFREQ"] == 1400.0
        assert hdu.data["PROFILE"].shape == (2, 2, 64)
        assert np.array_equal(hdu.data["PROFILE"][1, 0], ps.data[1, 0])
        assert hdu.columns["FOLDFREQ"].unit == "Hz"
        # a table written without TDIM (channels x bins flat in each row) reads the same
        cols = [fits.Column(name=c.name, format=c.format, unit=c.unit, array=hdu.data[c.name]
                            if c.name != "PROFILE" else hdu.data[c.name].reshape(2, -1))
                for c in hdu.columns]
        flat = fits.BinTableHDU.from_columns(cols, header=hdu.header)
        del flat.header["TDIM*"]
        fits.HDUList([fits.PrimaryHDU(), flat]).writeto(tmp_path / "flat.fits")
    assert np.array_equal(read_profile_file(str(tmp_path / "flat.fits")).data, back.data)


def test_several_sets_in_one_file(tmp_path):
    rng = np.random.default_rng(5)
    path = tmp_path / "two.fits"
    write_profile_fits([_set(rng), _set(rng, ref=("60001.5", "60001.51"))], str(path))
    sets = read_profile_sets(str(path))
    assert [s.part for s in sets] == ["hdu1", "hdu2"] and sets[1].reference_mjd[0] == "60001.5"
    with pytest.raises(InputError, match="holds 2 profile sets"):
        read_profile_file(str(path))


def _simulate(outdir, fmt):
    return main(["simulate-profiles", os.path.join(SAMPLE, "demo-slow.toml"), "--site",
                 "desert-dish", "--start", "60000", "--end", "60004", "--count", "3",
                 "--bins", "128", "--channels", "2", "--subints", "2", "--seed", "9",
                 "--snr", "60", "--profile-format", fmt, "-o", str(outdir)])


def test_npz_and_fits_give_identical_toas(tmp_path, capsys):
    assert _simulate(tmp_path / "npz", "npz") == 0
    assert _simulate(tmp_path / "fits", "fits") == 0
    assert "(.fits," in capsys.readouterr().out
    fits_files = sorted(str(p) for p in (tmp_path / "fits").glob("obs-*.fits"))
    npz_files = sorted(str(p) for p in (tmp_path / "npz").glob("obs-*.npz"))
    assert len(fits_files) == len(npz_files) == 3
    tables = {}
    for name, files in (("npz", npz_files), ("fits", fits_files)):
        out = tmp_path / f"{name}.toas"
        template = tmp_path / name / f"template.{name}"        # the format of the profiles
        assert main(["profile-toas", *files, "--template", str(template), "--per-channel", "-o",
                     str(out)]) == 0
        auto = tmp_path / f"{name}-auto.toas"
        assert main(["profile-toas", *files, "--template", "auto", "-o", str(auto)]) == 0
        tables[name] = read_toa_table(str(out)), read_toa_table(str(auto))
    for fixed, auto in zip(tables["npz"], tables["fits"]):
        assert len(fixed) == len(auto) > 0
        assert list(fixed.mjd_text) == list(auto.mjd_text)
        assert np.array_equal(fixed.err_us, auto.err_us)
        assert [p.replace(".npz", "") for p in fixed.flags["profile"]] == [
            p.replace(".fits", "") for p in auto.flags["profile"]]


def test_template_fits(tmp_path, capsys):
    template = builtin_template(128)
    path = tmp_path / "t.fits"
    write_template_file(template, str(path))
    back = read_template_file(str(path))
    assert np.array_equal(back.profile, template.profile)
    assert np.array_equal(back.components, template.components)
    with fits.open(path) as hdul:                 # as an independent reader sees it
        assert hdul["TEMPLATE"].header["TKFORMAT"] == "timingkit-template"
        assert np.array_equal(hdul["COMPONENTS"].data["FWHM"], template.components[:, 1])
        hdul["TEMPLATE"].data = np.ones(128)
        hdul.writeto(tmp_path / "flat.fits")
    with pytest.raises(InputError, match=r"TEMPLATE \(HDU 1\) data: a template needs") as err:
        read_template_file(str(tmp_path / "flat.fits"))
    assert err.value.field == "TEMPLATE"
    with fits.open(path) as hdul:
        cols = [c for c in hdul["COMPONENTS"].columns if c.name != "FWHM"]
        hdul["COMPONENTS"] = fits.BinTableHDU.from_columns(cols, name="COMPONENTS")
        hdul.writeto(tmp_path / "nofwhm.fits")
    with pytest.raises(InputError, match=r"column FWHM missing in COMPONENTS \(HDU 2\)"):
        read_template_file(str(tmp_path / "nofwhm.fits"))
    # a profile file is not a template, nor the reverse
    rng = np.random.default_rng(8)
    write_profile_fits([_set(rng)], str(tmp_path / "obs.fits"))
    with pytest.raises(InputError, match="no template in this FITS file"):
        read_template_file(str(tmp_path / "obs.fits"))
    with pytest.raises(InputError, match="no profile set in this FITS file"):
        read_profile_sets(str(path))


def _broken(tmp_path, change):
    rng = np.random.default_rng(6)
    good = tmp_path / "good.fits"
    write_profile_fits([_set(rng)], str(good))
    with fits.open(good) as hdul:
        change(hdul)
        bad = tmp_path / "bad.fits"
        hdul.writeto(bad, overwrite=True)
    return str(bad)


def _drop_column(name):
    def change(hdul):
        hdu = hdul[1]
        cols = [c for c in hdu.columns if c.name != name]
        new = fits.BinTableHDU.from_columns(cols, header=hdu.header, name="PROFILES")
        del new.header["TDIM*"]
        new.header["TDIM" + str([c.name for c in cols].index("PROFILE") + 1)] = "(64,2)"
        hdul[1] = new
    return change


def _set_rows(column, values):
    def change(hdul):
        hdul[1].data[column] = values
    return change


def _replace_columns(hdul, columns):
    new = fits.BinTableHDU.from_columns(columns, header=hdul[1].header, name="PROFILES")
    hdul[1] = new


def _numeric_mjd(hdul):
    cols = [fits.Column(name="REFMJD", format="D", array=[60000.5, 60000.51])
            if c.name == "REFMJD" else c for c in hdul[1].columns]
    _replace_columns(hdul, cols)


def _extra_column(hdul):
    _replace_columns(hdul, [*hdul[1].columns, fits.Column(name="WEIGHTS", format="D",
                                                           array=[1.0, 1.0])])


@pytest.mark.parametrize("change,field,text", [
    (lambda h: h[1].header.remove("SITENAME"), "SITENAME", "keyword SITENAME missing in "
                                                           "PROFILES (HDU 1)"),
    (lambda h: h[1].header.set("CENTFREQ", "high"), "CENTFREQ", "expected a number"),
    (lambda h: h[1].header.set("CENTFREQ", -5.0), "CENTFREQ", "keyword CENTFREQ in PROFILES "
                                                              "(HDU 1): must be > 0 MHz"),
    (lambda h: h[1].header.set("TKFMTVER", 7), "TKFMTVER", "is not supported"),
    (_drop_column("FOLDFREQ"), "FOLDFREQ", "column FOLDFREQ missing in PROFILES (HDU 1)"),
    (_set_rows("REFMJD", ["60000.5", "6e4"]), "REFMJD", "column REFMJD in PROFILES (HDU 1): "
                                                         "row 2: scientific notation"),
    (_set_rows("CHANFREQ", [[1350.0, 1450.0], [1350.0, 1451.0]]), "CHANFREQ", "differs in row 2"),
    (_set_rows("FOLDFREQ", [100.0, -1.0]), "FOLDFREQ", "values must be > 0"),
    (lambda h: h[1].header.remove("TKFORMAT"), "TKFORMAT", "no profile set in this FITS file"),
    (_numeric_mjd, "REFMJD", "expected the MJDs as text"),
    (_extra_column, "WEIGHTS", "unknown column WEIGHTS in PROFILES (HDU 1)"),
], ids=["no-site", "text-frequency", "negative-frequency", "version", "no-column", "bad-mjd",
        "channels-differ", "negative-folding", "unmarked", "float-mjd", "unknown-column"])
def test_bad_fits_names_hdu_and_keyword(tmp_path, capsys, change, field, text):
    bad = _broken(tmp_path, change)
    with pytest.raises(InputError) as err:
        read_profile_sets(bad)
    assert err.value.field == field and text in str(err.value) and "bad.fits" in str(err.value)
    out = tmp_path / "x.toas"
    assert main(["profile-toas", bad, "--template", "auto", "-o", str(out)]) == 2
    assert f"field '{field}'" in capsys.readouterr().err
    assert not out.exists()


def test_not_fits_at_all(tmp_path):
    path = tmp_path / "trunc.fits"
    path.write_bytes(b"SIMPLE  =                    T" + b" " * 50)
    with pytest.raises(InputError, match="not a readable FITS file"):
        read_profile_sets(str(path))
