"""The certificate: self-contained HTML, the map's colours, and a real browser's rendering."""

from __future__ import annotations

import base64
import io
import re
import shutil
import subprocess

import numpy as np
import pytest
from flatsight.analysis.colormap import diverging_rgb
from flatsight.analysis.figures import compute_figures
from flatsight.analysis.records import certificate
from flatsight.analysis.records.tolerances import evaluate, parse_tolerance, spec_section
from flatsight.analysis.version import flatsight_version
from flatsight.analysis.zernike import ZernikeFit, zernike_basis
from PIL import Image

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
NEEDS_CHROMIUM = pytest.mark.skipif(
    CHROMIUM is None,
    reason="Debian's chromium is not installed (CI installs it: apt-get install -y chromium)")


def reference_height(a, x, y):
    """Slow obvious evaluation of a few Noll terms (Noll 1976, Table 1), y toward the top."""
    rho2 = x**2 + y**2
    rho = np.sqrt(rho2)
    theta = np.arctan2(y, x)
    return (a[3] * np.sqrt(3) * (2 * rho2 - 1)                       # j=4 power
            + a[5] * np.sqrt(6) * rho2 * np.cos(2 * theta)           # j=6 astigmatism 0
            + a[6] * np.sqrt(8) * (3 * rho**3 - 2 * rho) * np.sin(theta))  # j=7 coma y


def make_record(*, spec="3/1(0.25)", a4=-20.0, a6=8.0, a7=6.0, wavelength_nm=632.8):
    """A record whose figures come from the library's own figure code on a known surface."""
    a = np.zeros(36)
    a[3], a[5], a[6] = a4, a6, a7
    g = np.linspace(-1, 1, 201)
    x, y = np.meshgrid(g, g)
    inside = x**2 + y**2 <= 1
    basis = zernike_basis(36, x[inside], y[inside])
    h = np.full(x.shape, np.nan)
    h[inside] = basis @ a
    f = compute_figures(h, inside, x, y, ZernikeFit(a, 0.0, int(inside.sum())),
                        wavelength_nm=wavelength_nm)
    rec = {
        "photo": "BW-FL-0412.png", "photo_sha256": "3f" * 32, "wavelength_nm": wavelength_nm,
        "aperture": {"center_x_px": 640.0, "center_y_px": 480.0, "radius_px": 400.0},
        "pv_nm": f.pv_nm, "rms_nm": f.rms_nm, "pvr_nm": f.pvr_nm, "power_nm": f.power_nm,
        "power_fringes": f.power_fringes, "irregularity_nm": f.irregularity_nm,
        "astigmatism_nm": f.astigmatism_nm,
        "symmetric_irregularity_nm": f.symmetric_irregularity_nm,
        "rms_irregularity_nm": f.rms_irregularity_nm, "rms_asymmetric_nm": f.rms_asymmetric_nm,
        "radius_of_curvature_m": None,
        "zernike": {"ordering": "noll", "coefficients_nm": a.tolist()},
        "quality": {}, "settings": {"wavelength_nm": wavelength_nm, "n_terms": 36},
        "warnings": ["demo: <b>not</b> markup"],
        "record_id": 17, "part": "BW-FL-0412", "operator": "Tamsin Ode",
        "station": "bench-2", "logged_utc": "2026-12-02T07:10:00.000Z",
    }
    if spec:
        rec["spec"] = spec_section(evaluate(parse_tolerance(spec), rec))
    return rec


def embedded_png(html):
    m = re.search(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', html)
    assert m, "no embedded PNG"
    return Image.open(io.BytesIO(base64.b64decode(m.group(1)))).convert("RGB")


def test_html_is_self_contained_with_verdict_and_map():
    rec = make_record(spec="3/1(0.05)")  # irregularity ~40 nm > 0.05 fr = 13.7 nm: fails
    assert rec["spec"]["verdict"] == "fail"
    page = certificate.certificate_html(rec)
    assert 'class="verdict fail"' in page and ">FAIL<" in page
    assert "BW-FL-0412" in page and "Tamsin Ode" in page and "3f" * 32 in page
    assert "Takeda" in page and "Noll" in page and "reconstructed from the zernike fit" in (
        page.lower())
    assert "not a substitute for the shop" in page
    assert "&lt;b&gt;not&lt;/b&gt;" in page  # record text is escaped, never markup
    # nothing fetched from outside: no links, scripts, or URLs other than the data URI
    assert not re.search(r"<(link|script)\b", page)
    assert not re.search(r"(src|href)=\"(?!data:)", page)
    assert "url(" not in page
    img = embedded_png(page)
    assert img.size[1] == certificate.MAP_SIZE_PX + 2 * certificate.MAP_PAD_PX
    # Zernike table uses the trade's names (zernike.term_name), a pair as one row: a6 = 8
    # nm alone is astigmatism of 8 nm RMS with its high points at 0° (and 180°)
    assert re.search(r"<td>astigmatism</td><td class=\"num\">8\.00</td>.*?0°</td>", page)
    assert "@page" in page and "break-inside: avoid" in page


def test_each_figure_with_its_u_the_rule_in_words_and_an_inconclusive_verdict():
    rec = make_record(spec=None)
    u = {"pv_nm": 4.4, "rms_nm": 0.6, "pvr_nm": 4.1, "power_nm": 1.2,
         "irregularity_nm": 3.3, "astigmatism_nm": 0.9, "symmetric_irregularity_nm": 1.5,
         "rms_irregularity_nm": 0.5, "rms_asymmetric_nm": 0.5}
    rec["uncertainty"] = u
    rec["uncertainty_budget"] = {"coverage_factor": 2, "basis": "noise, method, wavelength",
                                 "map_noise_nm": 0.4, "wavelength_uncertainty_nm": 0.0,
                                 "reference_uncertainty_nm": 6.0, "photos": 4}
    # a PV limit 2 nm above the value, inside its U of 4.4 nm: inconclusive under the
    # guarded rule (ISO 14253-1 / ILAC G8, from memory); the simple rule passes it
    limit = round(rec["pv_nm"] + 2.0, 1)
    rec["spec"] = spec_section(evaluate(parse_tolerance(f"pv<={limit}nm"), rec,
                                        decision="guarded"))
    page = certificate.certificate_html(rec)
    assert 'class="verdict inconclusive"' in page and ">INCONCLUSIVE<" in page
    assert "under the guarded decision rule" in page
    assert "pass when value + U is within the limit" in page  # the rule in words
    assert "conformity is not proven either" in page  # what inconclusive means
    for key, value in u.items():  # every figure beside its U
        assert f"<td class=\"num\">± {value:.1f}</td>" in page, key
    assert f"± {u['pv_nm']:.1f} nm" in page and f"+{limit - rec['pv_nm']:.1f} nm" in page
    assert "coverage factor k = 2" in page and "JCGM 100:2008" in page
    assert "reference flat 6.0 nm (k = 2)" in page and "4 photos averaged" in page
    # how the figures are taken, from analysis/figures.py's own account
    assert "How the figures are taken" in page and "filtered map" in page
    assert "Evans 2009" in page and "**" not in page and "``" not in page
    rec["spec"] = spec_section(evaluate(parse_tolerance(f"pv<={limit}nm"), rec))
    page = certificate.certificate_html(rec)
    assert 'class="verdict pass"' in page and "under the simple decision rule" in page


def zernike_table_rows(page):
    """(Noll indices, term) of each row of the page's Zernike table."""
    table = re.search(r'<table class="zern">(.*?)</table>', page, re.S).group(1)
    return [(tuple(int(j) for j in m.group(1).split(", ")), m.group(2))
            for m in re.finditer(r'<tr><td class="num">([\d, ]+)</td>.*?<td>([^<]*)</td>', table)]


@pytest.mark.parametrize(("removed", "words"), [
    ([1, 2, 3], "piston and tilt (Noll 1–3)"),
    ([1, 2, 3, 4], "piston, tilt and power (Noll 1–4)"),
    ([1, 2, 3, 11], "piston, tilt and spherical (Noll 1–3, 11)"),
])
def test_removed_terms_are_said_in_words_and_left_out_of_the_zernike_table(removed, words):
    # issue 9 item 12: the page printed `removed_terms = [1, 2, 3]` and listed piston under
    # a heading saying piston and tilt are removed
    rec = make_record()
    a = rec["zernike"]["coefficients_nm"]
    a[0], a[1], a[10] = 122.96, 15.0, 30.0  # a large piston and tilt, as a real fit has
    rec["settings"]["removed_terms"] = removed
    page = certificate.certificate_html(rec)
    assert "removed_terms" not in page and "[1, 2, 3" not in page
    assert f"Zernike terms without {words}</h2>" in page
    assert f"Figures ({words} removed)</h2>" in page
    listed = {j for js, _ in zernike_table_rows(page) for j in js}
    assert listed and not listed & set(removed)
    assert "122.96" not in page and "piston</td>" not in page
    assert (4 in listed) == (4 not in removed)  # power a4 = -20 nm is listed unless removed


def test_a_pair_is_one_row_with_its_size_and_the_angle_of_a_high_point():
    # a cosine and sine pair of one order, a_c cos(m t) + a_s sin(m t), is A cos(m (t - t0)):
    # checked against the slow obvious way, the highest point of the pair's own surface on
    # the rim found by evaluating it every 0.01 degree (Noll 1976 normalisation)
    from flatsight.analysis.zernike import nm_to_noll

    a = np.zeros(36)
    a[4], a[5] = 4.0, 3.0  # Noll 5 (sine, m = -2) and 6 (cosine, m = +2)
    j_sin, j_cos = nm_to_noll(7, -7), nm_to_noll(7, 7)
    a = np.zeros(max(j_sin, j_cos))
    a[4], a[5] = 4.0, 3.0
    a[j_sin - 1] = 2.0  # heptafoil, sine term alone: orientation 90/7 = 12.857 deg
    rows = {r[0]: r for r in certificate.zernike_rows(a)}
    t = np.radians(np.arange(0, 360, 0.01))
    for js, m, size in (((5, 6), 2, 5.0), (tuple(sorted((j_sin, j_cos))), 7, 2.0)):
        _, _, abs_m, name, got_size, angle = rows[js]
        assert abs_m == m and got_size == pytest.approx(size) and "°" not in name
        h = zernike_basis(a.size, np.cos(t), np.sin(t))[:, [j - 1 for j in js]] @ a[
            [j - 1 for j in js]]
        high = np.degrees(t[np.argmax(h)]) % (360 / m)
        assert 0 <= angle < 360 / m
        assert abs(angle - high) <= 0.5 + 1e-9, (js, angle, high)
    assert rows[tuple(sorted((j_sin, j_cos)))][3] == "heptafoil" and rows[(5, 6)][4] == 5.0
    assert [r[4] for r in certificate.zernike_rows(a)][:2] == [5.0, 2.0]  # largest first
    page = certificate.certificate_html(make_record() | {"zernike": {
        "ordering": "noll", "coefficients_nm": a.tolist()}})
    assert "12.857" not in page and "heptafoil" in page


def test_the_page_names_the_log_the_record_came_from():
    page = certificate.certificate_html(make_record(), log="/srv/shop/inspections.sqlite")
    assert "<th>Record</th><td>17 in /srv/shop/inspections.sqlite</td>" in page
    # an average names its photos, and says it has no single photo's hash
    page = certificate.certificate_html(full_record() | {"photo_sha256": None})
    assert "average of 3 photos: BW-FL-0412_0.png, BW-FL-0412_1.png, BW-FL-0412_2.png" in page
    assert "not recorded for photos combined" in page
    assert "map /srv/shop/maps/BW-REF-01.npy subtracted" in page and "ab" * 32 in page


def test_no_signed_zero_on_the_page():
    rec = make_record(a4=-0.001, a6=0.0, a7=-0.0004)
    rec["power_nm"], rec["radius_of_curvature_m"] = -0.004, None
    page = certificate.certificate_html(rec)
    # a value that rounds to zero is written without a sign (analysis/formatting.py)
    assert not re.search(r"-0\.0+(?![0-9])", re.sub(r"<style>.*?</style>", "", page, flags=re.S))


def test_no_tolerance_says_so():
    page = certificate.certificate_html(make_record(spec=None))
    assert 'class="verdict none"' in page and "NO TOLERANCE" in page


def test_the_certificate_names_the_version_that_measured():
    rec = make_record() | {"flatsight_version": flatsight_version()}
    page = certificate.certificate_html(rec)
    assert f"<th>Software</th><td>Flatsight {flatsight_version()}</td>" in page
    assert "certificate by" not in page  # measured and written by the same version
    png = Image.open(io.BytesIO(certificate.map_png(rec)))
    assert png.text["Software"] == f"Flatsight {flatsight_version()}"


def test_a_record_from_another_version_says_both():
    now = flatsight_version()
    page = certificate.certificate_html(make_record() | {"flatsight_version": "0.0.9"})
    assert f"measured with Flatsight 0.0.9; certificate by Flatsight {now}" in page
    # a record written before records carried a version says so rather than guessing
    page = certificate.certificate_html(make_record())
    assert f"Flatsight version not recorded; certificate by Flatsight {now}" in page


def test_map_colours_match_the_colour_map_at_known_pixels():
    rec = make_record()
    a = np.array(rec["zernike"]["coefficients_nm"])
    img = np.asarray(Image.open(io.BytesIO(certificate.map_png(rec))).convert("RGB"))
    n, pad = certificate.MAP_SIZE_PX, certificate.MAP_PAD_PX
    # pixel centres in unit-disk coordinates, written out here rather than borrowed
    c = (np.arange(n) + 0.5) / n * 2 - 1
    xs, ys = np.meshgrid(c, -c)
    inside = xs**2 + ys**2 <= 1
    span = np.abs(reference_height(a, xs[inside], ys[inside])).max()
    checked = 0
    for row, col in [(n // 2, n // 2), (40, n // 2), (n - 40, n // 2), (n // 2, 40),
                     (n // 2, n - 40), (90, 90), (250, 300), (120, 260)]:
        x, y = xs[row, col], ys[row, col]
        want = diverging_rgb(np.array([reference_height(a, x, y)]), -span, span)[0]
        got = img[pad + row, pad + col]
        assert np.abs(got.astype(int) - want).max() <= 1, (row, col, got, want)
        checked += 1
    assert checked == 8
    # coma y alone, a7 > 0: near the rim (rho ~ 0.95, where 3 rho^3 - 2 rho > 0) it is high
    # toward the top of the photo, amber (warm) there and slate blue at the bottom
    coma = np.asarray(Image.open(io.BytesIO(certificate.map_png(
        make_record(a4=0.0, a6=0.0, a7=10.0)))).convert("RGB")).astype(int)
    top, bottom = coma[pad + 9, pad + n // 2], coma[pad + n - 10, pad + n // 2]
    assert top[0] > top[2] + 30 and bottom[2] > bottom[0] + 30
    # outside the aperture the page shows white paper
    assert tuple(img[pad + 2, pad + 2]) == (255, 255, 255)
    # the colour bar runs from +span at the top to -span at the bottom
    bar_x = pad + n + 2 * pad + certificate.BAR_WIDTH_PX // 2
    top_bar, bot_bar = img[pad, bar_x], img[pad + n - 1, bar_x]
    assert np.abs(top_bar.astype(int) - diverging_rgb(np.array([span]), -span, span)[0]).max() <= 1
    assert np.abs(bot_bar.astype(int) - diverging_rgb(np.array([-span]), -span, span)[0]).max() <= 1


def test_saved_height_map_is_used_when_the_record_names_one(tmp_path):
    h = np.full((50, 60), np.nan)
    yy, xx = np.mgrid[:50, :60]
    disk = (xx - 30) ** 2 + (yy - 25) ** 2 <= 20**2
    h[disk] = (xx - 30)[disk] * 1.0  # a ramp from -20 to +20 nm, left to right
    np.save(tmp_path / "map.npy", h)
    rec = make_record() | {"height_map_path": str(tmp_path / "map.npy")}
    got, source = certificate.surface_map(rec)
    assert "saved with the record" in source
    assert got.shape == (41, 41) and np.nanmax(got) == 20 and np.nanmin(got) == -20
    missing = make_record() | {"height_map_path": str(tmp_path / "gone.npy")}
    assert "reconstructed" in certificate.surface_map(missing)[1]


def test_osa_ordering_gives_the_same_map():
    rec = make_record()
    noll = np.array(rec["zernike"]["coefficients_nm"])
    from flatsight.analysis.zernike import noll_to_osa

    osa = np.zeros(max(noll_to_osa(j) for j in range(1, 37)) + 1)
    for j in range(1, 37):
        osa[noll_to_osa(j)] = noll[j - 1]
    rec_osa = rec | {"zernike": {"ordering": "osa", "coefficients_nm": osa.tolist()}}
    a, _ = certificate.surface_map(rec, size_px=64)
    b, _ = certificate.surface_map(rec_osa, size_px=64)
    np.testing.assert_allclose(a, b, atol=1e-9)


# --- a real browser ---------------------------------------------------------------------------


def chromium(tmp_path, *args):
    cmd = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", f"--user-data-dir={tmp_path / 'profile'}", *args]
    done = subprocess.run(cmd, capture_output=True, timeout=120)
    assert done.returncode == 0, done.stderr.decode(errors="replace")[-2000:]


def near_count(img, rgb, tol=10):
    diff = np.abs(np.asarray(img, dtype=int) - np.array(rgb)).max(axis=-1)
    return int((diff <= tol).sum())


@NEEDS_CHROMIUM
def test_browser_shows_the_map_and_the_verdict(tmp_path):
    rec = make_record(spec="3/1(0.05)")
    html_path = tmp_path / "certificate.html"
    html_path.write_text(certificate.certificate_html(rec), encoding="utf-8")
    shot = tmp_path / "shot.png"
    chromium(tmp_path, f"--screenshot={shot}", "--window-size=900,1200",
             "--force-device-scale-factor=1", html_path.as_uri())
    img = np.asarray(Image.open(shot).convert("RGB"))
    # the red verdict banner (analysis/records/certificate.VERDICT_RGB) fills a large block
    assert near_count(img, certificate.VERDICT_RGB["fail"], tol=4) > 20000
    # green appears only as the word PASS of a limit that passed, never as a banner
    assert near_count(img, certificate.VERDICT_RGB["pass"], tol=4) < 1000
    # the map's own colours are on screen: sample the PNG at points inside the disk
    map_img = np.asarray(embedded_png(html_path.read_text(encoding="utf-8")))
    n, pad = certificate.MAP_SIZE_PX, certificate.MAP_PAD_PX
    for row, col in [(n // 2, n // 2), (60, n // 2), (n - 60, n // 2), (n // 2, 60)]:
        colour = map_img[pad + row, pad + col]
        assert near_count(img, colour, tol=6) > 30, (row, col, colour)


def full_record():
    """A record with about everything a shop's record carries: an average of three photos
    against a reference map, a guarded ISO tolerance with an RMS clause, warnings,
    power removed as well, a diameter."""
    rec = make_record(spec=None)
    rec["uncertainty"] = dict.fromkeys(
        ("pv_nm", "rms_nm", "pvr_nm", "power_nm", "irregularity_nm", "astigmatism_nm",
         "symmetric_irregularity_nm", "rms_irregularity_nm", "rms_asymmetric_nm"), 3.3)
    rec["uncertainty_budget"] = {
        "coverage_factor": 2, "map_noise_nm": 0.4, "wavelength_uncertainty_nm": 0.01,
        "reference_uncertainty_nm": 6.0, "photos": 3,
        "basis": "the map's noise propagated by Monte Carlo (JCGM 101:2008), the method's "
                 "limits as validated on independent reference photos, the stated "
                 "wavelength and reference-flat uncertainties"}
    rec["spec"] = spec_section(evaluate(parse_tolerance("3/1(0.25/0.1) RMSt < 0.05"), rec,
                                        decision="guarded"))
    rec["warnings"] = [f"3.1 % of the pixels are saturated in BW-FL-0412_{k}.png: shorten "
                       "the exposure" for k in range(3)]
    rec["average"] = {"photos": [f"/srv/shop/photos/BW-FL-0412_{k}.png" for k in range(3)],
                      "n_photos": 3}
    rec["reference"] = {"path": "/srv/shop/maps/BW-REF-01.npy", "sha256": "ab" * 32}
    rec["settings"] |= {"invert": False, "diameter_mm": 150.0, "removed_terms": [1, 2, 3, 4]}
    rec["radius_of_curvature_m"] = -1234.5
    return rec


@NEEDS_CHROMIUM
@pytest.mark.parametrize("which", ["plain", "full"])
@pytest.mark.parametrize(("paper", "size_pt"), [("A4", (595, 842)), ("letter", (612, 792))])
def test_prints_on_one_a4_and_one_letter_page(tmp_path, paper, size_pt, which):
    # issue 9 item 12: the certificate ran to 3 pages where customers file one
    rec = make_record() if which == "plain" else full_record()
    page = certificate.certificate_html(rec).replace(
        "</style>", f"@page {{ size: {paper}; }}</style>")  # the printer's paper choice
    html_path = tmp_path / "certificate.html"
    html_path.write_text(page, encoding="utf-8")
    pdf = tmp_path / "certificate.pdf"
    chromium(tmp_path, f"--print-to-pdf={pdf}", "--no-pdf-header-footer", html_path.as_uri())
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF")
    boxes = {tuple(round(float(v)) for v in m.groups())
             for m in re.finditer(rb"/MediaBox\s*\[\s*0 0 ([\d.]+) ([\d.]+)\s*\]", data)}
    assert boxes == {size_pt}
    if shutil.which("pdftoppm") is None:
        pytest.skip("pdftoppm (poppler-utils) not installed: page images not checked")
    subprocess.run(["pdftoppm", "-r", "40", "-png", str(pdf), str(tmp_path / "p")],
                   check=True, timeout=60)
    pages = sorted(tmp_path.glob("p-*.png"))
    assert len(pages) == 1
    if shutil.which("pdfinfo"):
        info = subprocess.run(["pdfinfo", str(pdf)], capture_output=True, text=True,
                              timeout=60, check=True).stdout
        assert re.search(r"^Pages:\s+1$", info, re.M), info
    first = np.asarray(Image.open(pages[0]).convert("RGB"))
    colour = certificate.VERDICT_RGB[rec["spec"]["verdict"]]
    assert near_count(first, colour, tol=6) > 500  # the banner prints
    for p in pages:  # nothing runs into the right-hand margin (content narrower than paper)
        img = np.asarray(Image.open(p).convert("L"))
        inked = np.flatnonzero((img < 200).any(axis=0))
        assert inked.size and inked.max() < img.shape[1] - 0.04 * img.shape[1]


def test_a_sparse_record_still_makes_a_page():
    page = certificate.certificate_html({"wavelength_nm": 632.8})
    assert "NO TOLERANCE" in page and "no Zernike coefficients" in page


def test_saved_tif_map_is_read(tmp_path):
    h = np.full((30, 30), np.nan, dtype=np.float32)
    h[5:25, 5:25] = 7.0
    Image.fromarray(h).save(tmp_path / "map.tif", format="TIFF")
    got, source = certificate.surface_map(make_record() | {"height_map_path":
                                                           str(tmp_path / "map.tif")})
    assert "saved with the record" in source and got.shape == (20, 20)
    assert np.all(got == 7.0)


def test_a_replaced_record_says_which_record_replaced_it():
    # a certificate written for a record the station later superseded must say so
    page = certificate.certificate_html(make_record() | {"superseded_by": 18})
    assert "<th>Replaced by</th><td>record 18: the same photo measured again" in page
    assert "Replaced by" not in certificate.certificate_html(make_record())
