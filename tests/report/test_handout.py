"""`taprig handout` on sessions of every example rig kind, made on the simulated rig in compressed time.

The PDF is read back with poppler (pdftotext, pdftoppm, pdfinfo; ``make test`` installs them through
tools/ensure-poppler): its headings are there, the numbers it prints equal the session's own (read here from the
file independently of the report), and no page is blank.
"""

from __future__ import annotations

import json
import math
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from taprig.analysis import analyse_points, point_table
from taprig.cli import main
from taprig.report import point_state
from taprig.analysis.wording import pm, pm_exponent
from taprig.session.api import open_session
from taprig.session.store import SessionReader
from tests.report.sessions import RIGS, fan_steps_session, sweep_session

ROOT = Path(__file__).resolve().parents[2]
VENTURI_PITOT = ROOT / "tests" / "analysis" / "venturi-pitot.toml"
SIM_C = 0.97  # the discharge coefficient given to the simulated venturi (sim option venturi_c; invented)


def _poppler(tool: str) -> str:
    path = shutil.which(tool)
    if path is None:
        pytest.fail(f"{tool} not found: `make test` installs Debian's poppler-utils (tools/ensure-poppler)")
    return path


def pdf_text(pdf: Path, page: int | None = None) -> str:
    args = [_poppler("pdftotext"), "-layout"]
    if page is not None:
        args += ["-f", str(page), "-l", str(page)]
    return subprocess.run([*args, str(pdf), "-"], capture_output=True, text=True, check=True, timeout=120).stdout


def pdf_pages(pdf: Path) -> int:
    info = subprocess.run([_poppler("pdfinfo"), str(pdf)], capture_output=True, text=True, check=True).stdout
    return int(re.search(r"^Pages:\s+(\d+)", info, re.M).group(1))


def ink(png: Path) -> float:
    """Fraction of a PNG's pixels that are not white (0 for a blank page)."""
    from matplotlib.image import imread

    img = imread(str(png))[..., :3]
    return float(np.mean(np.any(img < 0.9, axis=-1)))


def assert_no_blank_page(pdf: Path, tmp: Path) -> int:
    subprocess.run([_poppler("pdftoppm"), "-r", "30", "-png", str(pdf), str(tmp / "page")], check=True, timeout=300)
    pages = sorted(tmp.glob("page-*.png"))
    assert len(pages) == pdf_pages(pdf)
    for page in pages:
        assert ink(page) > 0.01, f"{page.name} of {pdf.name} is blank"
    return len(pages)


def values(text: str) -> list[tuple[float, float, int]]:
    """Every ``x ± u`` printed in ``text``: (x, u, decimals shown)."""
    out = []
    for m in re.finditer(r"(-?\d+(?:\.(\d+))?) ± (\d+(?:\.\d+)?)", text):
        out.append((float(m.group(1)), float(m.group(3)), len(m.group(2) or "")))
    return out


def shown(text: str, value: float, u: float) -> bool:
    """True when ``value ± u`` is printed in ``text`` to the digits shown (half the last digit)."""
    return any(abs(x - value) <= 0.5 * 10**-d + 1e-12 and abs(e - u) <= 0.5 * 10**-d + 1e-12
               for x, e, d in values(text))


def handout(*argv) -> tuple[int, str, str]:
    import contextlib
    import io

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = main(["handout", *map(str, argv)])
        except SystemExit as exc:
            code = exc.code
    return code, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def sessions(tmp_path_factory) -> dict[str, Path]:
    """One session per rig kind (the venturi twice: without and with a flow reference of its own)."""
    d = tmp_path_factory.mktemp("sessions")
    return {
        "airfoil": sweep_session(d / "airfoil.taprig", "cambered-balance.toml", -4, 16, 2),
        # a simulated blower twice as strong as the rig's stated top speed (10 m/s): full blower saturates a sensor
        "venturi": fan_steps_session(d / "venturi.taprig", RIGS / "venturi-8.toml", (0.3, 0.5, 1.0),
                                     query="max_speed=20"),
        "venturi-pitot": fan_steps_session(d / "venturi-pitot.taprig", VENTURI_PITOT, (0.3, 0.4, 0.5),
                                           query=f"venturi_c={SIM_C}"),
        "cylinder": fan_steps_session(d / "cylinder.taprig", RIGS / "cylinder.toml", (0.4, 0.6, 1.0)),
        "bump": fan_steps_session(d / "bump.taprig", RIGS / "bump-channel.toml", (0.5, 0.8)),
    }


HEADINGS = ("What the numbers rest on", "What they omit", "Ambient conditions", "Calibration", "The record",
            "Safety", "Cp distribution of each point", "Points with their uncertainties", "The link's counters")
KIND_HEADING = {"airfoil": "Lift curve, stall and hysteresis", "venturi": "Venturi: pressures, flow rate",
                "venturi-pitot": "Discharge coefficient against Re_D", "cylinder": "Cp against angle beside potential",
                "bump": "Cp along the model at every point"}


@pytest.mark.parametrize("kind", list(KIND_HEADING))
def test_every_rig_kind_renders_with_its_headings_and_no_blank_page(sessions, kind, tmp_path):
    pdf = tmp_path / f"{kind}.pdf"
    code, out, err = handout(sessions[kind], "-o", pdf)
    assert code == 0, err
    assert f"{pdf}: " in out and "Traceback" not in err
    text = pdf_text(pdf)
    for heading in (*HEADINGS, KIND_HEADING[kind]):
        assert heading in text, f"{heading!r} missing from the {kind} handout"
    assert assert_no_blank_page(pdf, tmp_path) >= 4


def test_the_cover_and_the_table_print_the_sessions_own_numbers(sessions, tmp_path):
    path = sessions["airfoil"]
    pdf = tmp_path / "airfoil.pdf"
    assert handout(path, "-o", pdf)[0] == 0
    cover = pdf_text(pdf, 1)
    with open_session(path) as s:
        meta, summary = s.meta, s.summary()
        records = [p.data for p in s._reader.points()]
    # ambient conditions as stored with the session (SI in meta; hPa and °C on the page)
    assert f"pressure {float(meta['ambient_pressure_pa']) / 100:.1f} hPa" in cover
    assert f"temperature {float(meta['ambient_temperature_k']) - 273.15:.1f} °C" in cover
    # the counters are a fresh decode of the file, as `taprig info` prints them
    for name, words in (("crc_errors", "CRC errors"), ("gaps", "gaps"), ("scans_lost", "scans lost"),
                        ("frames_lost", "frames lost")):
        assert f"{words} {summary[name]}" in cover
    assert f"scans {summary['scans']}" in cover and "The record is whole" in cover
    # how the uncertainties were propagated, as recorded with each point
    flat = " ".join(cover.split())
    methods = {r.get("uncertainty_method") for r in records if r.get("uncertainty_method")}
    assert methods and all(method in flat for method in methods)
    # the reference-pressure assumption is the reducer's own sentence
    assert summary["assumptions"][0].split(":")[0] in " ".join(cover.split())
    # the table: q ± u(q) and Cl ± u(Cl) of every point as recorded
    table = "\n".join(pdf_text(pdf, k) for k in range(1, pdf_pages(pdf) + 1))
    chosen = point_table(records)  # the analysis's choice of coefficients ("best")
    for r, cl, u_cl in zip(records, chosen.cl, chosen.u_cl):
        assert shown(table, r["q_pa"], r["u_q_pa"]), f"q of {r['alpha_rad']} rad not printed as recorded"
        assert shown(table, cl, u_cl), f"Cl of {r['alpha_rad']} rad not printed as recorded"
        # V ± u(V) and Re ± u(Re) as the reduction recorded them (Re printed as (m ± u_m)ek)
        assert r.get("u_v_ms") is not None and shown(table, r["v_ms"], r["u_v_ms"]), "V not printed as recorded"
        k = int(math.floor(math.log10(r["re"])))
        assert shown(table, r["re"] / 10**k, r["u_re"] / 10**k), f"Re of {r['alpha_rad']} rad not printed"
    # the lift curve's numbers: the analysis of these records (GUM rounding, two significant digits of u)
    with SessionReader(path) as reader:
        from taprig.session.replay import rig_from_session

        analysis = analyse_points(records, rig_from_session(reader))
    lift = " ".join(pdf_text(pdf, 2).split())
    fit, stall = analysis.fit, analysis.stall
    assert f"Lift slope {pm(fit.slope_per_deg, fit.u_slope * math.pi / 180)} per degree" in lift  # u: both parts
    assert f"Cl max {pm(stall.cl_max, stall.u_cl_max)} at α = {math.degrees(stall.alpha_cl_max):.1f}°" in lift
    # the simulated NACA 2412 stalls within the sweep; the lift slope is near thin-airfoil 2π (within 15 %: a
    # 9-tap model with walls; Anderson, Fundamentals of Aerodynamics, §4.7)
    assert stall.stalled and "stall at" in lift
    assert abs(fit.slope / (2 * math.pi) - 1) < 0.15


def test_a_venturi_with_its_own_flow_reference_recovers_the_simulated_discharge_coefficient(sessions, tmp_path):
    pdf = tmp_path / "v.pdf"
    assert handout(sessions["venturi-pitot"], "-o", pdf)[0] == 0
    text = " ".join(pdf_text(pdf, 2).split())
    m = re.search(r"Discharge coefficient C = (\d\.\d+) ± (\d\.\d+)", text)
    assert m, text[:2000]
    c, u = float(m.group(1)), float(m.group(2))
    assert abs(c - SIM_C) <= 2 * u  # the simulator was given C = 0.97 (invented); k = 2
    assert "outside" in text and "Re_D" in text  # a teaching venturi runs below ISO 5167-4's Re_D range
    # without a flow reference of its own, the page says why C is not measured instead of printing the assumption
    pdf2 = tmp_path / "v2.pdf"
    assert handout(sessions["venturi"], "-o", pdf2)[0] == 0
    assert "C not measured" in " ".join(pdf_text(pdf2, 2).split())


def test_the_cylinder_page_gives_each_points_cd_p_and_re_with_their_uncertainties(sessions, tmp_path):
    pdf = tmp_path / "cyl.pdf"
    assert handout(sessions["cylinder"], "-o", pdf)[0] == 0
    page = " ".join(pdf_text(pdf, 2).split())
    with SessionReader(sessions["cylinder"]) as r:
        entries = [(p.kind, p.data) for p in r.points()]
    table = point_table([data for _, data in entries])  # the analysis's choice of coefficients ("best")
    shown_points = 0
    for (label, record), cd, u_cd in zip(entries, table.cd_p, table.u_cd_p):
        if point_state(record, False):
            assert f"{label}: Cd_p" not in page
            continue
        shown_points += 1
        # Re as (m ± u_m)ek from the record's own u_re (the reduction's), beside Cd_p ± u
        assert record.get("u_re") is not None and math.isfinite(record["u_re"])
        assert f"{label}: Cd_p {pm(cd, u_cd)} (pressure drag only), Re {pm_exponent(record['re'], record['u_re'])}." \
            in page, page[-1200:]
    assert shown_points >= 2
    assert not re.search(r"Re \d(\.\d+)?e[+-]?\d", page)  # never a bare "Re x.xe+04"
    assert not re.search(r"\b(nan|None)\b", page)


def _row(table: str, label: str) -> str:
    rows = [line for line in table.splitlines() if line.strip().startswith(label)]
    assert rows, f"no table row for {label!r}"
    return rows[0]


def test_points_in_a_state_show_the_state_and_no_number(sessions, tmp_path):
    # At full blower (20 m/s, twice the rig's stated top speed) the simulated venturi's throat sensor saturates:
    # its reference goes, and the point is a state; at full fan the cylinder's shoulder taps saturate, the
    # reducer leaves them out and q stands.
    pdf = tmp_path / "v.pdf"
    assert handout(sessions["venturi"], "-o", pdf)[0] == 0
    with SessionReader(sessions["venturi"]) as r:
        records = {p.kind: p.data for p in r.points()}
    states = {label: point_state(rec, False) for label, rec in records.items()}
    assert states["blower 0.3"] == "" and states["blower 1"] != ""
    table = pdf_text(pdf, pdf_pages(pdf))
    bad = _row(table, "blower 1")
    assert states["blower 1"].upper() in bad and "±" not in bad
    assert "±" in _row(table, "blower 0.3")
    cover = " ".join(pdf_text(pdf, 1).split())
    assert "1 of 3 points are in a state" in cover


@pytest.mark.parametrize("record, failed, state", [
    ({"flags": ["NO_FLOW"], "q_pa": 0.2, "v_ms": None, "plain": None}, False, "no flow"),
    ({"flags": ["REFERENCE_INVALID"], "q_pa": None, "v_ms": None}, False, "reference invalid"),
    ({"flags": ["BEYOND_RIG"], "q_pa": 9e4, "u_q_pa": 1.0, "v_ms": 300.0, "plain": {"cl": 0.3}}, False,
     "implausible"),
    ({"flags": ["SATURATED"], "q_pa": 200.0, "u_q_pa": None, "v_ms": 18.0}, False, "saturated"),
    ({"flags": ["SATURATED", "DEGRADED"], "q_pa": 200.0, "u_q_pa": 1.0, "v_ms": 18.0, "plain": {"cl": 0.3}}, False,
     ""),
    ({"flags": [], "q_pa": 200.0, "u_q_pa": 1.0, "v_ms": 18.0, "plain": {"cl": 0.3}}, True, "bad calibration"),
    ({"flags": ["NO_FLOW"], "q_pa": 200.0, "u_q_pa": 1.0, "v_ms": 18.0, "plain": {"cl": 0.3}}, False, ""),
])
def test_point_states(record, failed, state):
    # DESIGN: no flow, invalid reference, saturation, implausible speed and failed calibration are states, not
    # numbers; a point's NO_FLOW flag is the OR over its scans, so made coefficients say it had flow
    assert point_state(record, failed) == state


@pytest.mark.parametrize("value, u, text", [
    (0.60543, 0.10149, "0.61 ± 0.10"),      # GUM §7.2.6: u to two significant digits, the value to match
    (153.8136, 0.9734, "153.81 ± 0.97"),
    (1234.5, 12.0, "1234 ± 12"),
    (-0.00134, 0.000163, "-0.00134 ± 0.00016"),
    (1.0, math.nan, None), (math.inf, 0.1, None), (None, 0.1, None),
])
def test_a_value_is_written_with_its_uncertainty_or_not_at_all(value, u, text):
    assert pm(value, u) == text


def test_png_writes_each_figure_alone(sessions, tmp_path):
    folder = tmp_path / "figs"
    code, out, err = handout(sessions["airfoil"], "--png", folder)
    assert code == 0, err
    files = sorted(folder.glob("*.png"))
    names = {f.stem.removeprefix("airfoil-") for f in files}
    with SessionReader(sessions["airfoil"]) as r:
        n_points = len(r.points())
    assert {"lift-curve", "drag-polar", "moment", "rig", "calibration"} <= names
    assert sum(n.startswith("cp-") for n in names) == n_points
    assert f"{len(files)} figures written" in out
    for f in files:
        assert ink(f) > 0.005, f"{f.name} is blank"


@pytest.fixture(scope="module")
def faster(tmp_path_factory) -> Path:
    """The airfoil session's model again at a higher fan setting, every 4° (a second Reynolds number)."""
    return sweep_session(tmp_path_factory.mktemp("faster") / "faster.taprig", "cambered-balance.toml", -4, 12, 4,
                         seed=4, fan=1.0)


def test_two_sessions_are_compared_aligned_by_alpha_or_q(sessions, faster, tmp_path):
    # the same model at two fan settings: two Reynolds numbers on one figure
    other = faster
    pdf = tmp_path / "both.pdf"
    code, out, err = handout(sessions["airfoil"], other, "-o", pdf)
    assert code == 0, err
    page2 = pdf_text(pdf, 2)
    assert "Sessions compared" in page2 and "aligned by angle of attack" in page2
    assert "airfoil.taprig" in page2 and "faster.taprig" in page2
    with open_session(other) as s:
        records = [p.data for p in s._reader.points()]
    re_values = np.array([r["re"] for r in records])
    median = records[int(np.argmin(np.abs(re_values - np.median(re_values))))]
    assert f"Re {pm_exponent(median['re'], median['u_re'])}" in page2  # the median point's Re with its u
    one = tmp_path / "one.pdf"
    assert handout(other, "-o", one)[0] == 0
    first = tmp_path / "first.pdf"
    assert handout(sessions["airfoil"], "-o", first)[0] == 0
    assert pdf_pages(pdf) == pdf_pages(one) + pdf_pages(first) + 1
    assert_no_blank_page(pdf, tmp_path)
    by_q = tmp_path / "q.pdf"
    assert handout(sessions["airfoil"], other, "-o", by_q, "--align", "q")[0] == 0
    page2_q = " ".join(pdf_text(by_q, 2).split())
    assert "aligned by dynamic pressure" in page2_q
    # the two fan settings share no q: the page says so in words and draws no overlay
    assert "Cp overlay: the sessions share no dynamic pressure" in page2_q and "Cp of each session" not in page2_q
    figs = tmp_path / "figs"
    assert handout(sessions["airfoil"], other, "--png", figs)[0] == 0
    assert (figs / "comparison.png").exists() and ink(figs / "comparison-cp.png") > 0.005
    assert handout(sessions["airfoil"], other, "--png", tmp_path / "figs-q", "--align", "q")[0] == 0
    assert (tmp_path / "figs-q" / "comparison.png").exists()
    assert not (tmp_path / "figs-q" / "comparison-cp.png").exists()  # nothing shared: no figure


def test_the_comparison_overlays_each_sessions_cp_at_a_shared_angle_with_its_error_bars(sessions, faster, tmp_path):
    from taprig.report import load_session
    from taprig.report.figures import draw_cp_overlay
    from taprig.report.style import new_figure

    pdf = tmp_path / "both.pdf"
    assert handout(sessions["airfoil"], faster, "-o", pdf)[0] == 0
    page2 = " ".join(pdf_text(pdf, 2).split())
    m = re.search(r"Cp of each session at a shared angle, α = (-?\d+\.\d)°", page2)
    assert m, page2[-1500:]
    shared = float(m.group(1))
    # drawn again onto an Axes: one upper and one lower series per session, at the shared commanded angle
    contents = [load_session(sessions["airfoil"]), load_session(faster)]
    fig = new_figure()
    ax = fig.add_subplot()
    assert draw_cp_overlay(ax, contents, "alpha") == ""
    series = {c.get_label(): c for c in ax.containers}
    assert len(series) == 4 and ax.yaxis_inverted()
    markers = {}
    for content, path in zip(contents, (sessions["airfoil"], faster)):
        with SessionReader(path) as r:
            records = [p.data for p in r.points()
                       if abs(math.degrees(p.data["alpha_rad"]) - shared) < 1e-6]  # the sweep's commanded angle
        assert len(records) == 1, f"{path.name}: {len(records)} points at {shared}°"
        cp, u = records[0]["cp"], records[0]["u_cp"]
        layout = content.rig.tap_layout()
        for surface in ("upper", "lower"):
            (label, bars), = [(k, v) for k, v in series.items() if k.startswith(path.name) and k.endswith(surface)]
            assert f"q {pm(records[0]['q_pa'], records[0]['u_q_pa'])} Pa" in label
            assert label.split(":")[0] in page2  # the legend is printed on the page
            taps = {float(x): n for n, x, up in zip(layout.names, layout.x_c, layout.upper)
                    if bool(up) == (surface == "upper")}
            (bar,) = bars.lines[2]
            segments = bar.get_segments()
            assert len(segments) == sum(cp[n] is not None for n in taps.values())
            # each bar is a tap of the record: centred on its Cp, half-length its u(Cp) (the records' own values)
            for (x0, lo), (_, hi) in segments:
                name = taps[float(x0)]
                assert abs(0.5 * (lo + hi) - cp[name]) < 1e-9 and abs(0.5 * abs(hi - lo) - u[name]) < 1e-9
            line = bars.lines[0]
            markers.setdefault(path.name, set()).add((line.get_marker(), surface, str(line.get_markerfacecolor())))
    # sessions differ in marker shape (grey print), surfaces in fill, as on the single-session Cp pages
    shapes = {name: {m for m, _, _ in v} for name, v in markers.items()}
    assert len(shapes["airfoil.taprig"]) == 1 and shapes["airfoil.taprig"] != shapes["faster.taprig"]
    for v in markers.values():
        fills = {s: f for _, s, f in v}
        assert fills["upper"] != fills["lower"]


def _one_line(err: str) -> str:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and "Traceback" not in err, err
    return lines[0]


def test_bad_inputs_give_one_clear_line(sessions, tmp_path):
    missing = tmp_path / "nothing.taprig"
    code, _, err = handout(missing, "-o", tmp_path / "x.pdf")
    assert code == 2 and "nothing.taprig: no such file" in _one_line(err)
    text = tmp_path / "notes.taprig"
    text.write_text("not a session\n")
    code, _, err = handout(text, "-o", tmp_path / "x.pdf")
    assert code == 2 and "not a taprig session file" in _one_line(err)
    code, _, err = handout(tmp_path, "-o", tmp_path / "x.pdf")
    assert code == 2 and "folder" in _one_line(err)
    assert not (tmp_path / "x.pdf").exists()


def test_a_session_without_points_says_so(tmp_path):
    empty = tmp_path / "empty.taprig"
    assert main(["record", "--rig", str(RIGS / "cylinder.toml"), "--port", "sim://?seed=1&speed=max&watchdog_ms=0",
                 "--duration", "0.5", "--no-dashboard", "--quiet", "-o", str(empty)]) == 0
    code, _, err = handout(empty, "-o", tmp_path / "e.pdf")
    assert code == 1 and "holds no points" in _one_line(err)
    assert not (tmp_path / "e.pdf").exists()


def test_an_existing_pdf_is_kept_unless_forced(sessions, tmp_path):
    pdf = tmp_path / "keep.pdf"
    pdf.write_bytes(b"mine")
    code, _, err = handout(sessions["bump"], "-o", pdf)
    assert code == 2 and "already exists" in _one_line(err) and pdf.read_bytes() == b"mine"
    assert handout(sessions["bump"], "-o", pdf, "--force")[0] == 0 and pdf.read_bytes().startswith(b"%PDF")
    code, _, err = handout(sessions["bump"], "-o", tmp_path / "h.txt")
    assert code == 2 and ".pdf" in _one_line(err)
    code, _, err = handout(sessions["bump"], "--align", "sideways")
    assert code == 2 and "--align" in err and "Traceback" not in err


def test_upper_and_lower_differ_beyond_colour_and_negative_cp_is_up(sessions):
    # Readable in grey print and by colour-blind readers: the surfaces (and the fit's two halves) must differ in
    # marker shape, fill and dash, not only in hue (common practice for figures printed in grey)
    from matplotlib.colors import to_rgba

    from taprig.report import load_session
    from taprig.report.figures import draw_cp_point
    from taprig.report.style import new_figure

    content = load_session(sessions["airfoil"])
    fig = new_figure()
    ax = fig.add_subplot()
    point = [p for p in content.shown if p.fit is not None][2]
    draw_cp_point(ax, content, point)
    assert ax.yaxis_inverted()  # suction (negative Cp) up
    taps = {c.get_label(): c.lines[0] for c in ax.containers}
    upper, lower = taps["upper surface taps"], taps["lower surface taps"]
    assert upper.get_marker() != lower.get_marker()
    assert to_rgba(upper.get_markerfacecolor()) != to_rgba(lower.get_markerfacecolor())
    fits = {line.get_label(): line for line in ax.get_lines()}
    assert fits["fit, upper"].get_linestyle() != fits["fit, lower"].get_linestyle()
    # the fit is the reducer's shape fit through these taps: it passes near the measured Cp at the taps
    x, y = upper.get_data()
    fit_x, fit_y = fits["fit, upper"].get_data()
    order = np.argsort(fit_x)
    near = np.interp(np.asarray(x, dtype=float), np.asarray(fit_x)[order], np.asarray(fit_y)[order])
    layout = content.rig.tap_layout()
    u_at = {float(xc): point.record["u_cp"][n] for n, xc, up in zip(layout.names, layout.x_c, layout.upper) if up}
    u = np.array([u_at[float(v)] for v in x])
    assert np.all(np.abs(near - np.asarray(y, dtype=float)) <= 3 * u + 0.05)


def test_a_forced_calibration_that_failed_its_checks_shows_no_number(tmp_path):
    # DESIGN: a calibration that failed its own checks, used because forced, is a state: the cover says so and the
    # table shows the state for every point (the linearity flag is invented for the test)
    from datetime import datetime, timezone

    from taprig.rig import Calibration, ChannelCalibration

    cal = Calibration(rig_id="cylinder-13tap", date=datetime(2026, 3, 2, 9, 30, tzinfo=timezone.utc),
                      channels={"c90": ChannelCalibration(zero_counts=0.0, gain=1.0, n_points=5, residual_rms=4.0,
                                                          linearity_pct_fs=2.5,
                                                          flags=("non-linearity 2.5 % FS beyond 0.5 %",))})
    session = fan_steps_session(tmp_path / "forced.taprig", RIGS / "cylinder.toml", (0.5, 0.7), calibration=cal,
                                zero=False)
    pdf = tmp_path / "forced.pdf"
    assert handout(session, "-o", pdf)[0] == 0
    cover = " ".join(pdf_text(pdf, 1).split())
    assert "FAILED ITS OWN CHECKS" in cover and "c90 (non-linearity 2.5 % FS beyond 0.5 %)" in cover
    table = pdf_text(pdf, pdf_pages(pdf))
    for label in ("fan 0.5", "fan 0.7"):
        row = _row(table, label)
        assert "BAD CALIBRATION" in row and "±" not in row
    assert "±" not in pdf_text(pdf, 2)  # the theory page draws and states no number of this session


def test_an_up_and_down_sweep_shows_both_legs_and_its_hysteresis(tmp_path):
    from tests.report.sessions import sweep_with

    session = sweep_with(tmp_path / "ud.taprig", "cambered-balance.toml", "--from-deg", "-4", "--to-deg", "14",
                         "--step-deg", "2", "--up-and-down")
    with SessionReader(session) as r:
        legs = [p.data.get("leg") for p in r.points()]
    assert legs.count("up") >= 5 and legs.count("down") >= 5
    pdf = tmp_path / "ud.pdf"
    assert handout(session, "-o", pdf)[0] == 0
    lift = " ".join(pdf_text(pdf, 2).split())
    assert "sweep up" in lift and "sweep down" in lift
    assert "Hysteresis: up and down legs" in lift and "one-way sweep" not in lift
    cp = " ".join(pdf_text(pdf, k) for k in range(3, pdf_pages(pdf)))
    assert cp.count(" down") >= legs.count("down") and cp.count(" up") >= legs.count("up")
    assert_no_blank_page(pdf, tmp_path)


def test_a_fan_sweep_at_one_angle_is_shown_against_the_reynolds_number(tmp_path):
    from tests.report.sessions import sweep_with

    session = sweep_with(tmp_path / "re.taprig", "cambered-balance.toml", "--at-deg", "4", "--fans", "0.4:1.0:0.2")
    with SessionReader(session) as r:
        records = [p.data for p in r.points()]
    assert len(records) == 4 and len({round(p["re"], -3) for p in records}) == 4
    pdf = tmp_path / "re.pdf"
    assert handout(session, "-o", pdf)[0] == 0
    page = " ".join(pdf_text(pdf, 2).split())
    assert "Coefficients against the Reynolds number" in page and "no lift curve (one angle)" in page
    table = point_table(records)  # the analysis's choice of coefficients ("best")
    for re_d, u_re, cl, u in zip(table.re, table.u_re, table.cl, table.u_cl):
        assert np.isfinite(u_re) and f"Re {pm_exponent(re_d, u_re)}, Cl {pm(cl, u)}" in page  # Re with its u too


def test_the_table_states_v_and_re_with_the_records_uncertainty_or_says_it_is_not_stated():
    from types import SimpleNamespace

    from taprig.report.handout import TABLE_COLUMNS, table_rows
    from taprig.rig import RigKind

    new = {"alpha_rad": 0.0, "q_pa": 250.0, "u_q_pa": 2.0, "v_ms": 20.3576, "u_v_ms": 0.0833, "re": 135232.0,
           "u_re": 616.0}
    old = {k: v for k, v in new.items() if k not in ("u_v_ms", "u_re")}  # a session recorded before they were
    points = [SimpleNamespace(record=r, label=name, state="", shown=True, saturated_taps=())
              for name, r in (("new", new), ("old", old))]
    rows = table_rows(SimpleNamespace(points=points, rig=SimpleNamespace(kind=RigKind.CYLINDER)))
    v, re_ = TABLE_COLUMNS.index("V [m/s]"), TABLE_COLUMNS.index("Re")
    assert rows[0][v] == pm(new["v_ms"], new["u_v_ms"]) == "20.358 ± 0.083"
    assert rows[0][re_] == f"({pm(new['re'] / 1e5, new['u_re'] / 1e5)})e5" == "(1.3523 ± 0.0062)e5"
    assert rows[1][v] == "not stated" and rows[1][re_] == "≈ 1.4e+05 (u not stated)"


def test_the_iso_band_is_the_standards_stated_one_percent_at_k_2_not_doubled(sessions, tmp_path):
    # ISO 5167-4:2003 §5.5.4 (from memory): a classical venturi with a machined convergent has C = 0.995 with a
    # relative uncertainty of 1 %; ISO 5167-1:2003 §8 (from memory) states the standard's uncertainties at about
    # 95 % confidence, i.e. expanded with k ≈ 2. So the band is 0.995 × (1 ± 0.01) at k = 2, and the standard
    # uncertainty every other use takes (reduction, check) is 0.5 %.
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from taprig.analysis import ISO_MACHINED
    from taprig.physics.venturi import ISO5167_VENTURI_C_U_REL
    from taprig.reduce import ReduceOptions
    from taprig.report.content import load_session
    from taprig.report.figures import draw_discharge

    assert ISO_MACHINED.u_rel == ISO5167_VENTURI_C_U_REL == ReduceOptions().discharge_coefficient_u_rel == 0.005
    assert ISO_MACHINED.k == 2.0
    fig, ax = plt.subplots()
    try:
        draw_discharge(ax, load_session(sessions["venturi-pitot"]))
        (band,) = [c for c in ax.collections if c.get_label().startswith("ISO 5167-4")]
        y = np.concatenate([path.vertices[:, 1] for path in band.get_paths()])
        assert y.min() == pytest.approx(0.995 * (1 - 0.01), abs=1e-12)
        assert y.max() == pytest.approx(0.995 * (1 + 0.01), abs=1e-12)
    finally:
        plt.close(fig)
    pdf = tmp_path / "v.pdf"
    assert handout(sessions["venturi-pitot"], "-o", pdf)[0] == 0
    text = " ".join(pdf_text(pdf, 2).split())
    assert "C = 0.995 ± 1 % (k = 2, about 95 %)" in text, text[:3000]
    assert "± 2 %" not in text


def test_each_kind_shows_only_the_coefficients_it_claims(sessions, tmp_path):
    # What a kind claims is RigKind.coefficients, which taprig check and the sweep table ask too: a bump in a
    # channel claims no Cd_p (its page shows Cp only), a cylinder its pressure drag.
    bump, cylinder, both = tmp_path / "bump.pdf", tmp_path / "cylinder.pdf", tmp_path / "both.pdf"
    assert handout(sessions["bump"], "-o", bump)[0] == 0
    assert handout(sessions["cylinder"], "-o", cylinder)[0] == 0
    bump_text, cylinder_text = (" ".join(pdf_text(p).split()) for p in (bump, cylinder))
    assert "pressure drag only" not in bump_text and "Cd_p is pressure drag only" in cylinder_text
    assert re.search(r"Cd_p [-\d.]+ ± [\d.]+ \(pressure drag only\), Re", cylinder_text)  # a point's line
    # two bump sessions compared: the reason in words instead of an empty chart, then their Cp overlaid
    code, _, err = handout(sessions["bump"], sessions["bump"], "-o", both)
    assert code == 0, err
    page = " ".join(pdf_text(both, 2).split())
    assert "Sessions compared" in page and "claims no coefficient" in page


def test_a_venturi_point_beyond_a_sensors_rated_range_gives_no_c_but_its_state(tmp_path):
    # The venturi-pitot test rig with its station parts narrowed to ±1 kPa (a variant rig): at fan 0.5 the throat
    # reads beyond the part's rated range, where the datasheet specifies no accuracy, so no uncertainty can be
    # stated for C there (project rule: out of range is a state, not a number). C at the other points stands.
    from taprig.rig import load_rig
    from tests.report.sessions import fan_steps_session

    text = VENTURI_PITOT.read_text(encoding="utf-8")
    narrow = text.replace("pmin_pa = -2000.0\npmax_pa = 2000.0", "pmin_pa = -1000.0\npmax_pa = 1000.0")
    assert narrow != text
    rig_path = tmp_path / "venturi-pitot-narrow.toml"
    rig_path.write_text(narrow, encoding="utf-8")
    session = fan_steps_session(tmp_path / "narrow.taprig", rig_path, (0.3, 0.5, 0.7), query=f"venturi_c={SIM_C}")
    with SessionReader(session) as r:
        records = [p.data for p in r.points()]
    flags = [set(rec.get("flags") or ()) for rec in records]
    assert not flags[0] & {"SATURATED", "OUT_OF_RANGE"} and "OUT_OF_RANGE" in flags[1], flags
    a = analyse_points(records, load_rig(rig_path))
    dc = a.discharge
    assert dc is not None and math.isfinite(dc.c[0]) and abs(dc.c[0] - SIM_C) <= 2 * dc.u_c[0]
    assert all(np.isnan(dc.c[i]) and dc.states[i] for i in (1, 2)), (dc.c, dc.states)
    assert dc.states[1] == "beyond a sensor's rated range"
    assert dc.mean_c == pytest.approx(dc.c[0])  # the mean is the one point with a C
    pdf = tmp_path / "narrow.pdf"
    assert handout(session, "-o", pdf)[0] == 0
    page = " ".join(pdf_text(pdf, 2).split())
    assert "no C (beyond a sensor's rated range)" in page, page[:3000]
