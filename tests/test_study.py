"""The study: one pass that shares every solve, its report and its summary.

Sources: the international inch (exactly 25.4 mm, international yard and
pound agreement, 1959) for the builder's units, and the perimeter of the rectangular turns the
geometry is specified to have (computed by hand from the spec, not from the geometry code) for
the cut list.
"""

from __future__ import annotations

import dataclasses
import html
import json
import math
import re
from collections import Counter

import numpy as np
import pytest

from simloop.cli import main
from simloop.report_html import (SECTIONS, cut_list, format_summary, register_section, render_report,
                                 summary_dict)
from simloop.report_plots import (boost_figure, coverage_figure, length_text, loop_drawing_figure,
                                   pattern_figure, placement_figure)
from simloop.plot_style import report_style
from simloop.spec import load
from simloop.studies import SolveLogEntry, run_study
from tests.conftest import write_spec, receiver_table

SMALL_IMPERIAL = """
name = "small-imperial"
notes = "Bench <b>test</b> & <script>document.title='PWNED'</script><img src=x onerror=\\"document.title='PWNED'\\">"
[frame]
width = "20 in"
height = "16 in"
[winding]
style = "stacked"
turns = 4
pitch = "0.6 in"
[wire]
gauge = "20 AWG"
[taps]
turns = [2, 4]
[leads]
offset = "2.5 in"
[sweep]
start = "520 kHz"
stop = "1710 kHz"
points = 7
[mesh]
quality = "draft"
[tuner]
kind = "range"
min = "20 pF"
max = "1000 pF"
q = 400
"""

INCH_M = 0.0254  # exact by definition (international yard and pound agreement, 1959) [published]


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    """One study of a small draft loop, with no on-disk cache: every solve is new to this run."""
    spec = load(write_spec(tmp_path_factory.mktemp("study"), SMALL_IMPERIAL))
    return run_study(spec, workers=1, cache=None)


def test_validate_reuses_the_sweeps_solves(study):
    """No (mesh, environment, frequency) is factorised twice; validate's checks at the sweep's
    fit frequencies are served from the sweep's solves."""
    log = study.solve_log
    solved = Counter(e.key for e in log if e.how == "solved")
    assert max(solved.values()) == 1
    assert study.factorisations()["repeated"] == []
    sweep_keys = {e.key for e in log if e.stage == "sweep" and e.how == "solved"}
    validate_new = {e.key for e in log if e.stage == "validate" and e.how == "solved"}
    validate_shared = [e.key for e in log if e.stage == "validate" and e.how == "memory"]
    assert not sweep_keys & validate_new
    # validate's MoM checks at a frequency the sweep solved directly are handed over in memory
    # (with the circuit solver carrying the band, the sweep solves the MoM only above its floor,
    # so at least the top-of-band check is shared here)
    assert len(validate_shared) >= 1
    assert set(validate_shared) <= sweep_keys
    # The sweep's own record agrees: with a fresh store nothing it lists came from a cache, and
    # it made at least as many solves as it records (the junction solves are not in .solves).
    assert not any(s.cached for s in study.sweep.solves)
    assert len(study.sweep.solves) <= study.factorisations()["per_stage"]["sweep"]


def test_study_results_are_the_stage_results(study):
    """The study hands the same sweep to tune and validate (no second sweep)."""
    assert study.tune.inductance_h == pytest.approx(study.sweep.inductance_h, rel=1e-12, abs=0)
    assert study.validation.inductance_h == pytest.approx(study.sweep.inductance_h, rel=1e-12, abs=0)
    assert list(study.stage_seconds) == ["pattern-solve", "sweep", "tune", "validate", "couple", "pattern"]
    # couple and pattern work on the same sweep: its inductances and its taps
    assert study.couple.loop_inductance_h == pytest.approx(study.sweep.inductance_h, rel=1e-12, abs=0)
    assert study.pattern.tap_turns in study.sweep.tap_turns
    assert re.fullmatch(r"[0-9a-f]{64}", study.spec_sha256)


def test_cut_list_matches_the_hand_computed_turn_length(study):
    """Cut list against the wire path the spec describes, computed by hand.

    A stacked turn of the specified geometry runs half the bottom side, a side, the top, a side,
    and the other half of the bottom while stepping one pitch along the axis:
    w/2 + h + w + h + sqrt((w/2)² + p²). The mark for tap n is n turns from the start.
    """
    w, h, p = 20 * INCH_M, 16 * INCH_M, 0.6 * INCH_M
    turn = w / 2 + h + w + h + math.hypot(w / 2, p)  # computed from the formula
    rows = dict(cut_list(study.sweep.geometry))
    assert rows["winding: start terminal to tap 2 (mark the wire here)"] == pytest.approx(2 * turn, rel=1e-12)
    assert rows["winding wire (one piece, start terminal to its end)"] == pytest.approx(4 * turn, rel=1e-12)
    # Each lead: a drop of (i + 1) × offset and a run of (tap turns) × pitch + offset back to the
    # collector plane; the collector spans offset + 2 levels of offset.
    e = 2.5 * INCH_M
    assert rows["lead of tap 2 (drop and run)"] == pytest.approx(e + (2 * p + e), rel=1e-12)
    assert rows["lead of tap 4 (drop and run)"] == pytest.approx(2 * e + (4 * p + e), rel=1e-12)
    assert rows["collector (start terminal to the lead levels)"] == pytest.approx(3 * e, rel=1e-12)
    total = sum(v for k, v in rows.items() if k.startswith(("winding wire", "lead", "collector")))
    assert rows["total wire"] == pytest.approx(total, rel=1e-12)


def test_lengths_in_the_builders_units():
    """Inches exactly 25.4 mm (1959 agreement): 12 in is 0.3048 m; 1 m is 3 ft 3.37 in."""
    assert length_text(12 * INCH_M, "imperial") == "12.0 in"
    assert length_text(0.6 * INCH_M, "imperial") == "0.60 in"
    assert length_text(1.0, "imperial") == "3 ft 3.4 in"  # 39.370 in
    assert length_text(1.0, "imperial", both=True) == "3 ft 3.4 in (1.000 m)"
    assert length_text(0.7, "metric", both=True) == "700 mm (27.56 in)"


def test_spec_units_are_kept_for_the_report(tmp_path, study):
    assert study.spec.length_system == "imperial"
    metric = load(write_spec(tmp_path, SMALL_IMPERIAL.replace('"20 in"', '"0.5 m"').replace(
        '"16 in"', '"0.4 m"').replace('"0.6 in"', '"15 mm"').replace('"2.5 in"', '"6 cm"')))
    assert metric.length_system == "metric"
    page = render_report(study)
    assert "length [ft, in]" in page and re.search(r"<th>\d+ ft \d+\.\d in</th>", page)  # total wire


def test_report_escapes_user_text(study):
    """Markup and script in the spec's notes and name come out as text, never as markup."""
    evil_name = "<script>alert('x')</script>"
    result = dataclasses.replace(study, spec=dataclasses.replace(study.spec, name=evil_name))
    page = render_report(result)
    assert "<script" not in page.lower()  # the report has no script at all, and none got in
    assert "<img src=x" not in page
    assert html.escape(study.spec.notes, quote=True) in page
    assert html.escape(evil_name, quote=True) in page
    assert "default-src 'none'" in page  # and the page forbids scripts and network anyway


def test_report_has_every_section_in_order(study):
    page = render_report(study)
    headings = re.findall(r"<h2>(.*?)</h2>", page)
    assert headings == [h for _, h, _ in SECTIONS]
    order = ["The loop as built", "Band coverage and channel chart", "Boost at the radio", "Patterns and nulls",
             "Validation", "Assumptions and limits", "Safety"]
    assert [h for h in headings if h in order] == order  # the order
    for caution in ("power lines", "lightning", "kilovolts", "local electrical codes"):
        assert caution in page
    assert "http://" not in page.replace("http://www.w3.org", "") and "https://" not in page


def test_a_registered_section_is_rendered_in_place(study):
    saved = list(SECTIONS)
    try:
        register_section("extra", "Extra study", lambda r: f"<p>{r.spec.winding.turns} turns</p>",
                         before="validation")
        page = render_report(study)
        headings = re.findall(r"<h2>(.*?)</h2>", page)
        assert headings.index("Extra study") == headings.index("Validation") - 1
        assert "<p>4 turns</p>" in page
    finally:
        SECTIONS[:] = saved


def test_figures_have_axes_with_units(study):
    """Every axis that shows numbers is labelled with a unit in brackets."""
    with report_style():
        figs = [coverage_figure(study.tune), loop_drawing_figure(study.spec, study.sweep.geometry),
                boost_figure(study.couple, study.tune), placement_figure(study.couple)]
    for fig in figs:
        for ax in fig.axes:
            for label in (ax.get_xlabel(), ax.get_ylabel()):
                assert not label or re.search(r"\[.+\]", label), label
    cov = figs[0].axes
    assert cov[-1].get_xlabel() == "frequency [kHz]"
    assert "[pF]" in cov[1].get_ylabel() and "[kHz]" in cov[2].get_ylabel()


def test_summary_matches_the_stage_results(study):
    d = summary_dict(study)
    t = study.tune
    assert d["gaps_hz"] == [[float(a), float(b)] for a, b in t.gaps_hz]
    assert [c["tap"] for c in d["coverage"]] == list(t.tap_turns)
    assert sum(c["channels"] for c in d["coverage"]) == d["channels_covered"] == int(np.sum(t.covered))
    assert d["verdict"]["status"] == study.validation.verdict.status
    assert d["solves"]["repeated"] == 0
    json.dumps(d, allow_nan=False)


def test_cli_study_json_and_files(tmp_path, capsys):
    spec = write_spec(tmp_path, SMALL_IMPERIAL)
    out = tmp_path / "out"
    assert main(["study", str(spec), "--out", str(out), "--format", "json", "--workers", "1",
                 "--no-convergence"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["name"] == "small-imperial" and d["verdict"]["status"] in ("ok", "caution", "unreliable")
    for name in ("report.html", "sweep.json", "tuning.json", "validation.json", "study.json", "taps.s2p",
                 "coupling.json", "loop-receiver.s2p", "boost.png", "placement.png", "pattern.json", "pattern.png"):
        assert (out / name).stat().st_size > 0
    assert set(d["boost"]["best"]) >= {"boost_db", "position_m", "orientation_deg"}
    assert d["boost"]["optimum_spacing"]["distance_m"] > 0
    assert d["nulls"]["deepest"]["loop"]["depth_db"] < 0
    assert json.loads((out / "study.json").read_text())["spec_sha256"] == d["spec_sha256"]


def test_cli_study_bad_band_fails_before_solving(tmp_path, capsys):
    spec = write_spec(tmp_path, SMALL_IMPERIAL)
    out = tmp_path / "out"
    assert main(["study", str(spec), "--out", str(out), "--band", "itu-9"]) == 2
    assert "--band" in capsys.readouterr().err
    assert not out.exists()


def _cie_lightness(hex_colour: str) -> float:
    """CIE 1976 L* of an sRGB colour (IEC 61966-2-1 transfer curve, D65 white) [published formula]."""
    from matplotlib.colors import to_rgb

    lin = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in to_rgb(hex_colour)]
    y = 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]
    return 116 * y ** (1 / 3) - 16 if y > (6 / 29) ** 3 else (29 / 3) ** 3 * y


def test_taps_stay_apart_in_grey_print():
    """The first three taps differ by at least 10 L* (a clear step in grey; our design rule), and
    every tap has its own line style and marker."""
    from simloop.plot_style import TAP_COLOURS, tap_style

    lightness = sorted(_cie_lightness(c) for c in TAP_COLOURS[:3])
    assert min(b - a for a, b in zip(lightness, lightness[1:])) >= 10
    styles = [(tap_style(i)["linestyle"], tap_style(i)["marker"]) for i in range(len(TAP_COLOURS))]
    assert len(set(s[0] for s in styles)) == len(styles) and len(set(s[1] for s in styles)) == len(styles)


def test_notes_must_be_text(tmp_path):
    from simloop.errors import SpecError

    with pytest.raises(SpecError) as err:
        load(write_spec(tmp_path, SMALL_IMPERIAL.replace('notes = "Bench', 'notes = 5\n# "Bench')))
    assert err.value.problems[0][0] == "notes"


# --- couple and pattern in the study ------------------------------------------------------------


def test_pattern_solve_is_made_once_and_handed_over(study):
    """The pattern's factorisation is made once (ahead of the sweep) and the pattern stage gets
    every piece of it from memory; no (mesh, environment, frequency) is solved in two stages."""
    log = study.solve_log
    f = study.pattern.frequency_hz
    groups = {e.group for e in log if e.frequency_hz == f and e.stage in ("pattern-solve", "pattern")}
    assert len(groups) == 1
    assert {e.how for e in log if e.stage == "pattern"} == {"memory"}
    assert study.factorisations()["per_stage"]["pattern-solve"] == 1
    assert study.factorisations()["refactorised"] == []


def test_the_refactorisation_check_can_fail(study):
    """The check counts a group solved in a second stage (a frequency factorised twice)."""
    first = next(e for e in study.solve_log if e.how == "solved" and e.stage == "sweep")
    again = SolveLogEntry("validate", first.key + "-other-piece", "solved", first.group, first.frequency_hz)
    twice = dataclasses.replace(study, solve_log=study.solve_log + (again,))
    assert twice.factorisations()["refactorised"] == [first.group]


def test_pattern_on_a_sweep_frequency_is_factorised_once(tmp_path):
    """A [pattern] frequency that the sweep also solves (1115 kHz is the 4th of the 7 sweep points
    520–1710 kHz, (1710 − 520)/6 × 3 + 520, computed by hand) is factorised once: the sweep finds
    that port matrix in the store the pattern's solve filled."""
    spec = load(write_spec(tmp_path, SMALL_IMPERIAL + '[pattern]\nfrequency = "1115 kHz"\n'))
    result = run_study(spec, workers=1, cache=None, convergence=False)
    at = [s for s in result.sweep.solves if abs(s.frequency_hz - 1115e3) < 1e-3]
    assert at, "precondition: the sweep solves 1115 kHz directly"
    assert all(s.cached for s in at)  # served from the pattern's factorisation
    solved = {(e.stage, e.group) for e in result.solve_log if e.how == "solved" and abs(e.frequency_hz - 1115e3) < 1e-3}
    assert {st for st, _ in solved} == {"pattern-solve"} and len(solved) == 1
    assert result.factorisations()["refactorised"] == []


def test_boost_and_pattern_sections_mark_what_is_untrusted(study):
    """The small spec's tuner stops at 1000 pF (spec text) and its 4-turn tap needs more at the
    pattern's 1 MHz, so the pattern's capacitance is shown untrusted; the coupling module finds
    the optimum spacing at the closest allowed point, shown untrusted too."""
    p, c = study.pattern, study.couple
    assert p.capacitance_f > 1000e-12
    page = render_report(study)
    assert f'<span class="untrusted">{p.capacitance_f * 1e12:.1f} pF</span>' in page
    assert "outside the tuner's range" in page
    assert c.optimum_at_near_limit
    row = re.search(r"optimum spacing along the loop axis</td><td class=\"([^\"]*)\"", page)
    assert row and "untrusted" in row.group(1)


def test_every_pattern_response_is_drawn_and_listed(study):
    """Every response of the pattern (here a made-up "system" response replacing the real one)
    appears in the figure, the report and the summary."""
    from simloop.patterns import Null

    p = study.pattern
    system_db = p.response_db["loop"] - 3.0
    null = Null(azimuth_deg=45.0, elevation_deg=float(p.elevation_deg[0]), depth_db=-25.0, of="system",
                cause="beyond-dipole", detail={"e": 0.01, "without_rest_db": -60.0})
    grown = dataclasses.replace(p, response_db={**p.response_db, "system": system_db},
                                models={**p.models, "system": "circuit"},
                                nulls=tuple(n for n in p.nulls if n.of != "system") + (null,))
    result = dataclasses.replace(study, results={**study.results, "pattern": grown})
    with report_style():
        fig = pattern_figure(grown)
    labels = [line.get_label() for line in fig.axes[0].get_lines()]
    assert "loop + radio" in labels
    page = render_report(result)
    assert "loop + radio" in page and '<td class="text">system</td>' in page
    assert summary_dict(result)["nulls"]["deepest"]["system"]["depth_db"] == -25.0


def test_a_failed_pattern_stage_leaves_the_rest(tmp_path, monkeypatch, capsys):
    """A pattern whose solve fails is reported as not computed; every other output is written and
    the exit status is 1 (0 with --keep-going)."""
    import simloop.patterns
    from simloop.errors import SolverError

    def broken(*args, **kwargs):
        raise SolverError("1 MHz: injected failure")

    monkeypatch.setattr(simloop.patterns, "run_pattern", broken)
    spec = write_spec(tmp_path, SMALL_IMPERIAL)
    out = tmp_path / "out"
    assert main(["study", str(spec), "--out", str(out), "--workers", "1", "--no-convergence", "--no-cache"]) == 1
    assert "pattern stage failed" in capsys.readouterr().err
    page = (out / "report.html").read_text()
    assert "Not computed" in page and "injected failure" in page
    assert (out / "coupling.json").exists() and not (out / "pattern.json").exists()
    d = json.loads((out / "study.json").read_text())
    assert d["nulls"] == {"failed": "1 MHz: injected failure"}
    assert main(["study", str(spec), "--out", str(out), "--workers", "1", "--no-convergence", "--no-cache",
                 "--keep-going"]) == 0


def test_study_refuses_bad_receiver_placement_before_solving(tmp_path, capsys):
    """A radio whose rod passes through the winding is a spec error before any solve."""
    text = SMALL_IMPERIAL + receiver_table('["0 m", "0 m", "-8 in"]')
    out = tmp_path / "out"
    assert main(["study", str(write_spec(tmp_path, text)), "--out", str(out), "--no-cache"]) == 2
    assert "receiver" in capsys.readouterr().err
    assert not out.exists()


def test_notebook_study_takes_a_path(tmp_path):
    """simloop.study is the notebook function (not shadowed by a submodule) and loads a path."""
    import simloop
    import simloop.studies  # noqa: F401 - importing the module must not replace the function
    from simloop.errors import SpecError

    assert callable(simloop.study)
    with pytest.raises(SpecError) as err:
        simloop.study(tmp_path / "missing.toml")
    assert "missing.toml" in str(err.value)


def test_text_summary_stays_short(study):
    """The terminal summary: a line per tap plus gaps, boost, nulls and verdict, nothing more."""
    text = format_summary(study)
    lines = text.splitlines()
    assert len(lines) <= len(study.sweep.tap_turns) + 5
    assert any(line.startswith("  boost: best") for line in lines)
    assert any(line.startswith("  deepest nulls at 1000 kHz: loop") for line in lines)
