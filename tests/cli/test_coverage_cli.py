"""``kncast coverage``: JSON schema, table, chart, and bad input ending in exit status 2 with no files."""
from __future__ import annotations

import json
import math

import numpy as np
import pytest
from astropy.io import fits

T0 = "2027-04-10T03:00:00Z"
NIGHT_KEYS = {"site", "night", "dusk_utc", "dawn_utc", "observable_probability", "weighted_hours",
              "area90_observable_deg2"}


def write_map(path, nside=16, scale=1.0, ordering="NESTED", centre=(150.0, -25.0), kappa=200.0):
    """An invented localisation: a von Mises-Fisher blob around ``centre`` (RA, Dec deg)."""
    from astropy_healpix import healpix_to_xyz

    xyz = np.stack(healpix_to_xyz(np.arange(12 * nside * nside), nside, order=ordering.lower()))
    ra, dec = np.radians(centre)
    c = np.array([math.cos(dec) * math.cos(ra), math.cos(dec) * math.sin(ra), math.sin(dec)])
    p = np.exp(kappa * (c @ xyz - 1))
    p = scale * p / p.sum()
    hdu = fits.BinTableHDU.from_columns([fits.Column(name="PROB", format="D", array=p)])
    hdu.header.update({"PIXTYPE": "HEALPIX", "ORDERING": ordering, "NSIDE": nside, "COORDSYS": "C"})
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(path, overwrite=True)
    return path


def test_json_table_and_plot(tmp_path, run_cli):
    m = write_map(tmp_path / "loc.fits")
    out_json, out_png = tmp_path / "cov.json", tmp_path / "cov.png"
    status, out, err = run_cli("coverage", "--map", m, "--t0", T0, "--sites", "paranal,la-palma", "--nights", "2",
                               "--min-moon-sep", "20", "--json", out_json, "--plot", out_png)
    assert status == 0, err
    doc = json.loads(out_json.read_text())
    assert {"kncast", "kind", "map", "nights"} <= set(doc) and doc["kind"] == "coverage"
    assert {"path", "ordering", "nside", "npix", "area90_deg2"} <= set(doc["map"])
    assert len(doc["nights"]) == 4 and all(NIGHT_KEYS <= set(n) for n in doc["nights"])
    for n in doc["nights"]:
        assert 0.0 <= n["observable_probability"] <= 1.0 and n["weighted_hours"] >= 0.0
        assert 0.0 <= n["area90_observable_deg2"] <= doc["map"]["area90_deg2"] + 1e-6
    paranal = doc["nights"][1]
    assert paranal["site"] == "paranal" and paranal["observable_probability"] > 0.9  # Dec -25 in April
    assert "Probability observable" in out and "paranal" in out
    assert out_png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_json_to_stdout_is_plain_json(tmp_path, run_cli):
    m = write_map(tmp_path / "loc.fits", ordering="RING")
    status, out, err = run_cli("coverage", "--map", m, "--t0", T0, "--sites", "sutherland", "--nights", "1",
                               "--json", "-")
    assert status == 0, err
    assert json.loads(out)["map"]["ordering"] == "RING"


def test_renormalised_map_warns_in_one_line(tmp_path, run_cli):
    m = write_map(tmp_path / "loc.fits", scale=1.004)
    status, out, err = run_cli("coverage", "--map", m, "--t0", T0, "--sites", "paranal", "--nights", "1",
                               "--json", tmp_path / "c.json")
    assert status == 0
    assert err.strip().count("\n") == 0 and "warning" in err and "renormalised" in err
    assert json.loads((tmp_path / "c.json").read_text())["map"]["renormalised_from"] == pytest.approx(1.004)


@pytest.mark.parametrize("case, words", [
    ("not-normalised", "sum to"),
    ("corrupt", "not a readable FITS file"),
    ("ordering", "ORDERING"),
    ("missing", "file not found"),
    ("t0", "--t0"),
    ("site", "unknown site"),
    ("nights", "--nights"),
    ("plot-suffix", "--plot"),
])
def test_bad_input_exit_2_and_no_output(tmp_path, run_cli, case, words):
    m = write_map(tmp_path / "loc.fits")
    t0, sites, nights, plot = T0, "paranal", "1", tmp_path / "c.png"
    if case == "not-normalised":
        m = write_map(tmp_path / "half.fits", scale=0.5)
    elif case == "corrupt":
        (tmp_path / "bad.fits").write_bytes(m.read_bytes()[:3000])
        m = tmp_path / "bad.fits"
    elif case == "ordering":
        with fits.open(m, mode="update") as h:
            h[1].header["ORDERING"] = "ZIGZAG"
    elif case == "missing":
        m = tmp_path / "absent.fits"
    elif case == "t0":
        t0 = "2027-04-10 03:00"
    elif case == "site":
        sites = "paranall"
    elif case == "nights":
        nights = "0"
    elif case == "plot-suffix":
        plot = tmp_path / "c.gif"
    out_json = tmp_path / "c.json"
    status, out, err = run_cli("coverage", "--map", m, "--t0", t0, "--sites", sites, "--nights", nights,
                               "--json", out_json, "--plot", plot)
    assert status == 2
    assert words in err and len(err.strip().splitlines()) == 1
    assert not out_json.exists() and not plot.exists()
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []  # no temporary leftovers


def test_map_is_required(run_cli):
    status, out, err = run_cli("coverage", "--t0", T0)
    assert status == 2 and "--map" in err


def test_multi_order_map_with_chart(tmp_path, run_cli):
    """A UNIQ table mixing levels 3 and 5 (the blob refined, the rest coarse) runs end to end."""
    from astropy_healpix import healpix_to_xyz

    coarse = np.arange(12 * 4 ** 3)
    xyz = np.stack(healpix_to_xyz(coarse, 8, order="nested"))
    c = np.array([math.cos(math.radians(-25)) * math.cos(math.radians(150)),
                  math.cos(math.radians(-25)) * math.sin(math.radians(150)), math.sin(math.radians(-25))])
    refine = (c @ xyz) > math.cos(math.radians(15))
    fine = (coarse[refine][:, None] * 16 + np.arange(16)).ravel()
    uniq = np.r_[4 * 4 ** 3 + coarse[~refine], 4 * 4 ** 5 + fine]
    fine_xyz = np.stack(healpix_to_xyz(fine, 32, order="nested"))
    density = np.r_[np.full((~refine).sum(), 1e-6), np.exp(100 * (c @ fine_xyz - 1))]
    area = 4 * math.pi / (12 * 4.0 ** np.r_[np.full((~refine).sum(), 3), np.full(fine.size, 5)])
    density /= np.sum(density * area)
    hdu = fits.BinTableHDU.from_columns([fits.Column(name="UNIQ", format="K", array=uniq),
                                         fits.Column(name="PROBDENSITY", format="D", unit="sr-1", array=density)])
    hdu.header.update({"PIXTYPE": "HEALPIX", "ORDERING": "NUNIQ", "COORDSYS": "C"})
    path = tmp_path / "moc.fits"
    fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(path)
    status, out, err = run_cli("coverage", "--map", path, "--t0", T0, "--sites", "paranal", "--nights", "2",
                               "--json", tmp_path / "m.json", "--plot", tmp_path / "m.svg")
    assert status == 0, err
    doc = json.loads((tmp_path / "m.json").read_text())
    assert doc["map"]["multi_order"] and doc["map"]["nside"] == 32
    assert doc["nights"][1]["observable_probability"] > 0.9
    assert (tmp_path / "m.svg").read_text().lstrip().startswith("<?xml")
