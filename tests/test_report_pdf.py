"""The PDF report: built from the record alone, read back with pypdf.

Checks that the report says what the record says (headline numbers rounded
by GUM 7.2.6, every section title, page N of M and the record id on every
page), that long tables split across pages with their header repeated, and
that a failed build leaves no file behind, and that the report of an
equilibrium study is laid out around its combined K. The demo data are
invented (see example_inputs/); the Monte Carlo, equilibrium and advice
blocks added to the assay record below are made up only to exercise their
sections, they check layout, not metrology.
"""

from __future__ import annotations

import copy
import re
from dataclasses import FrozenInstanceError

import numpy as np
import pytest
from conftest import DEMOS
from pypdf import PdfReader

from validate.advisor import advice as advisor
from validate.inputs.method_file import load_method
from validate.propagation import mcstats
from validate.propagation.budget import round_gum
from validate.report import figures, sections_study, sections_uncertainty
from validate.report.pdf import FIXED, ReportInfo, build_report
from validate.validation.criteria import evaluate_criteria
from validate.validation.summary import validate_calibration

DEMO = DEMOS / "phosphate_assay" / "method.toml"
OPTIONAL_BLOCKS = ("validation", "equilibrium", "advice", "monte_carlo_settings")


def pages_text(path) -> list[str]:
    """Each page's text with runs of white space made single spaces."""
    return [" ".join((page.extract_text() or "").split()) for page in PdfReader(str(path)).pages]


def bare(record: dict) -> dict:
    """The record without the optional blocks, so only the fixed sections and calibration remain."""
    out = {k: v for k, v in copy.deepcopy(record).items() if k not in OPTIONAL_BLOCKS}
    for result in out["results"]:
        result.pop("monte_carlo", None)
    return out


def synthetic_monte_carlo(result: dict, rng) -> dict:
    """A Monte Carlo block in the record's shape, from normal draws (layout only)."""
    values = result["value"] + result["standard_uncertainty"] * rng.standard_normal(20_000)
    s = mcstats.summarise(values)
    tol = mcstats.numerical_tolerance(s.standard_deviation)
    gum = (result["value"] - result["expanded_uncertainty"],
           result["value"] + result["expanded_uncertainty"])
    check = mcstats.validate_gum(result["value"], gum, (s.symmetric.low, s.symmetric.high), tol)
    hist = mcstats.histogram_data(values, 60)
    return {"trials": 20_000, "mean": s.mean, "standard_uncertainty": s.standard_deviation,
            "interval": [s.symmetric.low, s.symmetric.high],
            "shortest_interval": [s.shortest.low, s.shortest.high],
            "agrees_with_gum": check.agrees, "invalid_trials": 0, "seed": 20240917,
            "gum_interval": list(gum), "tolerance": tol, "d_low": check.d_low, "d_high": check.d_high,
            "histogram": {"edges": list(hist.edges), "counts": list(hist.counts)},
            "shares_by_step": result["budget_by_step"][:3],
            "shares_by_equipment": result["budget_by_equipment"][:3]}


def with_all_blocks(record: dict) -> dict:
    """The demo record with every optional block: the pipeline's own where it writes them,
    made-up ones (layout only) where it does not yet."""
    full = copy.deepcopy(record)
    if not full.get("validation"):
        points = full["calibration"]["points"]
        summary = validate_calibration([p["concentration"] for p in points],
                                       [p["absorbance"] for p in points],
                                       blanks=[p["absorbance"] for p in points if p["id"] == "blank"])
        full["validation"] = {**summary.to_dict(), "criteria": evaluate_criteria(
            {}, summary.observed_for_criteria()).to_dict()}
    rng = np.random.default_rng(7)
    for r in full["results"]:
        if not r.get("monte_carlo"):
            r["monte_carlo"] = synthetic_monte_carlo(r, rng)
    if not full.get("equilibrium"):
        full["equilibrium"] = {
            "conditions": {"temperature": "25 degC", "ionic_strength": "0.1 mol/L"},
            "mixtures": [{"id": f"mixture {i}", "K": 150.0 + i, "u_K": 5.0,
                          "interval": [140.0 + i, 160.0 + i]} for i in range(4)],
            "combined": {"K": 151.37, "standard_uncertainty": 2.61, "expanded_uncertainty": 5.22,
                         "interval": [146.15, 156.59],
                         "consistency": {"chi_square": 1.1, "dof": 3, "p_value": 0.78,
                                         "birge_ratio": 0.6, "verdict": "the mixtures agree"}},
            "complete_complexation_bias": {"slope": -0.03, "K": 0.08},
            "log10K": {"value": 2.18, "standard_uncertainty": 0.0075}}
    if not full.get("advice"):  # the advisor's own report, with a short Monte Carlo check
        full["advice"] = advisor.advise(load_method(DEMO), confirm_with_mc=1, mc_trials=5_000).to_dict()
    return full


@pytest.fixture(scope="module")
def demo_record(phosphate_demo) -> dict:
    return phosphate_demo.record  # few trials (20 000): this checks layout; shared, do not change


@pytest.fixture(scope="module")
def demo_report(phosphate_report):
    return phosphate_report  # built once per session (conftest)


@pytest.mark.slow
def test_demo_report_has_every_section_title(demo_report):
    info, path, pages = demo_report
    text = " ".join(pages)
    assert set(FIXED) <= set(info.sections)
    assert "Calibration" in info.sections  # the demo is read off a calibration line
    for number, title in enumerate(info.sections, 1):
        assert f"{number} {title}" in text, title


@pytest.mark.slow
def test_page_n_of_m_and_record_id_on_every_page(demo_report, demo_record):
    info, path, pages = demo_report
    assert info.page_count == len(pages) == len(PdfReader(str(path)).pages)
    record_id = demo_record["run"]["record_id"]
    for n, page in enumerate(pages, 1):
        assert f"page {n} of {info.page_count}" in page
        assert record_id in page


@pytest.mark.slow
def test_first_page_headline_numbers_equal_the_record(demo_report, demo_record):
    first = " ".join(demo_report[2][:2])  # the summary: page 1, running onto page 2 with many results
    assert demo_record["run"]["record_id"] in first
    for r in demo_record["results"]:
        value, big_u = round_gum(r["value"], r["expanded_uncertainty"])  # GUM 7.2.6
        assert f"{value} {r['unit']}" in first
        assert f"{big_u} {r['unit']}" in first
        # k to three significant digits; trailing zeros dropped (k = 1.996 is shown as 2)
        k = r["coverage_factor"]
        assert f"{k:.2f}" in first or f"{float(format(k, '.3g')):g}" in first
    assert "95 %" in first


@pytest.fixture(scope="module")
def full_report(demo_record, tmp_path_factory):
    record = with_all_blocks(demo_record)
    path = tmp_path_factory.mktemp("full") / "report.pdf"
    return record, build_report(record, path), pages_text(path)


@pytest.mark.slow
def test_first_page_shows_each_acceptance_verdict(full_report):
    record, _, pages = full_report
    # the summary (section 1): page 1, and the top of page 2 when many results and warnings fill page 1
    first = " ".join(pages[:2]).split("2 Inputs")[0]
    criteria = record["validation"]["criteria"]["criteria"]
    evaluated = [c for c in criteria if c["status"] in ("met", "not met")]
    assert evaluated
    for c in evaluated:
        name = c["name"].replace("^2", "²")
        row = re.search(re.escape(name) + r".{0,80}?\b(not met|met|not evaluable)\b", first)
        assert row and row.group(1) == c["status"], name


@pytest.mark.slow
def test_input_file_hashes_and_version_in_the_appendix(demo_report, demo_record):
    text = " ".join(demo_report[2])
    compact = re.sub(r"\s", "", text)
    for item in demo_record["inputs"]:
        assert item["sha256"] in compact
    assert f"validate {demo_record['software']['version']}" in text


@pytest.mark.slow
def test_report_info_is_frozen_with_to_dict(demo_report):
    info = demo_report[0]
    assert isinstance(info, ReportInfo)
    assert info.to_dict() == {"page_count": info.page_count, "sections": list(info.sections)}
    with pytest.raises(FrozenInstanceError):
        info.page_count = 1


@pytest.mark.slow
def test_absent_blocks_are_left_out_and_present_ones_rendered(demo_record, full_report, tmp_path):
    plain = build_report(bare(demo_record), tmp_path / "plain.pdf")
    optional = {"Linearity", "Limits of detection and quantitation", "Working range",
                "Equilibrium constant", "What to improve first"}
    assert not optional & set(plain.sections)
    # a stage that did not run is said so, with why, not left out silently
    plain_text = " ".join(pages_text(tmp_path / "plain.pdf"))
    assert "Monte Carlo check" in plain.sections
    assert "Not run in this evaluation: the run asked for the linear engine only" in plain_text
    optional.add("Monte Carlo check")
    full_record, full, pages = full_report
    assert optional <= set(full.sections)
    assert set(FIXED) <= set(full.sections)
    text = " ".join(pages)
    for number, title in enumerate(full.sections, 1):
        assert f"{number} {title}" in text, title
    assert full.page_count > plain.page_count
    # the Monte Carlo interval on the first page, to the decimal place of U
    for r in full_record["results"]:
        _, big_u = round_gum(r["value"], r["expanded_uncertainty"])
        places = len(big_u.split(".")[1])
        low, high = r["monte_carlo"]["interval"]
        assert f"[{low:.{places}f}, {high:.{places}f}] {r['unit']}" in pages[0]
    for item in full_record["advice"]["items"][:3]:  # shown without the backticks the advisor marks names with
        assert " ".join(item["change"].replace("`", "").split()) in text
    assert "`" not in text
    combined = full_record["equilibrium"]["combined"]
    value, big_u = round_gum(combined["K"], combined["expanded_uncertainty"])
    unit = full_record["equilibrium"].get("unit", "L/mol")
    assert f"{value} {unit}" in pages[0] and f"{big_u} {unit}" in pages[0]


def synthetic_record(sources: int = 50) -> dict:
    """One result with a long, flat budget: enough rows to fill more than one page."""
    contributions = np.arange(20, 20 + sources, dtype=float)[::-1] * 1e-4
    variance = float(np.sum(contributions**2))
    rows = [{"result": "analyte", "source": f"budget entry {i + 1:02d}", "step": f"step {i % 5}",
             "equipment": f"item {i % 7}", "unit": "mL", "standard_uncertainty": 0.01,
             "sensitivity": c / 0.01, "contribution": c, "share": c**2 / variance}
            for i, c in enumerate(contributions)]
    result = {"name": "analyte", "unit": "mg/L", "value": 1.2345, "standard_uncertainty": variance**0.5,
              "expanded_uncertainty": 2 * variance**0.5, "coverage_factor": 2.0,
              "coverage_probability": 0.95, "effective_dof": None,
              "budget_by_step": [{"group": f"step {k}", "contribution": 0.0, "share": 0.2} for k in range(5)],
              "budget_by_equipment": []}
    return {"software": {"name": "validate", "version": "test"},
            "run": {"record_id": "VR-TEST-0001", "created": "2024-01-01T00:00:00+00:00"},
            "method": {"title": "Synthetic long budget", "formula": "x", "result_unit": "mg/L"},
            "results": [result], "budget": rows, "sources": [], "calibration": None}


def test_long_budget_splits_with_header_repeated(tmp_path, monkeypatch):
    monkeypatch.setattr(sections_uncertainty, "MIN_SHARE_SHOWN", 0.0)  # every row in the table
    info = build_report(synthetic_record(50), tmp_path / "long.pdf")
    pages = pages_text(tmp_path / "long.pdf")
    with_rows = [p for p in pages if "budget entry" in p]
    assert len(with_rows) >= 2
    for page in with_rows:
        assert "sensitivity c_i" in page and "c_i u(x_i) / mg/L" in page
    text = " ".join(pages)
    for i in range(1, 51):  # no row lost at a page break
        assert f"budget entry {i:02d}" in text
    assert info.page_count == len(pages)


def test_budget_lists_the_sources_above_the_stated_share_and_sums_the_rest(tmp_path, monkeypatch):
    monkeypatch.setattr(sections_uncertainty, "MIN_SHARE_SHOWN", 0.02)  # the synthetic budget has rows on both sides
    record = synthetic_record(50)
    build_report(record, tmp_path / "budget.pdf")
    text = " ".join(pages_text(tmp_path / "budget.pdf"))
    limit = sections_uncertainty.MIN_SHARE_SHOWN
    shown = [r for r in record["budget"] if r["share"] >= limit]
    rest = [r for r in record["budget"] if r["share"] < limit]
    assert shown and rest  # the synthetic budget has both
    for r in shown:
        assert r["source"] in text
    for r in rest:
        assert r["source"] not in text
    total = round(100 * sum(r["share"] for r in rest), 2)
    assert f"{len(rest)} further sources, each below {100 * limit:.0f} % of the variance, together {total:.2f} %" \
        in text
    assert f"at least {100 * limit:.0f} % of its variance are listed" in text  # the share is stated


def test_a_result_without_a_number_is_shown_as_a_dash(tmp_path):
    record = synthetic_record(3)
    record["results"][0].update(value=None, expanded_uncertainty=None)  # JSON null from nan/inf
    info = build_report(record, tmp_path / "report.pdf")
    first = pages_text(tmp_path / "report.pdf")[0]
    assert "analyte – mg/L – mg/L" in first
    assert info.page_count >= 1


def test_advice_as_a_plain_list_is_rendered(tmp_path):
    record = synthetic_record(3)
    record["advice"] = [{"change": "use a class A burette", "expanded_uncertainty_after": 0.05,
                         "reduction": 0.25, "cost": "a new burette"}]
    info = build_report(record, tmp_path / "report.pdf")
    text = " ".join(pages_text(tmp_path / "report.pdf"))
    assert "What to improve first" in info.sections
    assert "use a class A burette" in text and "0.05 mg/L" in text and "25.0 %" in text


@pytest.mark.slow
def test_failed_build_leaves_nothing_behind(demo_record, tmp_path, monkeypatch):
    def broken(*args, **kwargs):
        raise RuntimeError("figure failed")

    monkeypatch.setattr(figures, "step_shares_chart", broken)  # drawn once for the demo's seven results
    target = tmp_path / "report.pdf"
    with pytest.raises(RuntimeError, match="figure failed"):
        build_report(demo_record, target)
    assert list(tmp_path.iterdir()) == []


@pytest.mark.slow
def test_failed_build_keeps_the_previous_report(demo_record, tmp_path, monkeypatch):
    target = tmp_path / "report.pdf"
    target.write_bytes(b"previous report")
    monkeypatch.setattr(figures, "calibration_figure", lambda *a, **k: 1 / 0)
    with pytest.raises(ZeroDivisionError):
        build_report(demo_record, target)
    assert target.read_bytes() == b"previous report"
    assert [p.name for p in tmp_path.iterdir()] == ["report.pdf"]


def test_not_a_record_is_refused_with_a_clear_message(tmp_path):
    with pytest.raises(ValueError, match="the record lacks"):
        build_report({"method": {}}, tmp_path / "report.pdf")
    assert list(tmp_path.iterdir()) == []


def test_prediction_band_matches_the_textbook_formula():
    # Draper and Smith (1998), section 3.1: t s sqrt(1 + 1/n + (x0 - xbar)^2 / Sxx);
    # checked against the same quantities computed independently by scipy.stats.linregress.
    from scipy import stats
    x = np.array([0.0, 1.0, 2.0, 3.0, 4.0, 5.0])
    y = np.array([0.02, 0.11, 0.19, 0.32, 0.41, 0.49])
    fit = stats.linregress(x, y)
    half, s = figures.prediction_band(x, y, [2.5, 6.0], fit.slope, fit.intercept)
    s_ref = np.sqrt(np.sum((y - fit.intercept - fit.slope * x) ** 2) / 4)
    assert s == pytest.approx(s_ref)
    # se(slope) = s / sqrt(Sxx) from linregress gives Sxx independently of our code
    sxx = (s_ref / fit.stderr) ** 2
    t = stats.t.ppf(0.975, 4)
    expected = t * s_ref * np.sqrt(1 + 1 / 6 + (np.array([2.5, 6.0]) - 2.5) ** 2 / sxx)
    assert half == pytest.approx(expected)


@pytest.mark.slow
def test_assay_report_keeps_a_budget_per_result(demo_report, demo_record):
    text = " ".join(demo_report[2])
    for r in demo_record["results"]:
        value, _ = round_gum(r["value"], r["expanded_uncertainty"])
        assert f"y = {value} {r['unit']}, u(y)" in text, r["name"]  # each result's own budget


# --------------------------------------------------------------------------
# the report of an equilibrium study (the invented nickel demo, a real run)

@pytest.fixture(scope="module")
def nickel_record(nickel_demo) -> dict:
    return nickel_demo.record  # few trials (20 000): this checks layout


@pytest.fixture(scope="module")
def nickel_report(nickel_record, tmp_path_factory):
    path = tmp_path_factory.mktemp("nickel") / "report.pdf"
    info = build_report(nickel_record, path)
    return info, path, pages_text(path)


def section_text(pages: list[str], info, title: str) -> str:
    """The text of one numbered section, up to the next section's heading."""
    text = " ".join(pages)
    number = info.sections.index(title) + 1
    start = text.index(f"{number} {title}")
    if number == len(info.sections):
        return text[start:]
    return text[start:text.index(f"{number + 1} {info.sections[number]}", start)]


@pytest.mark.slow
def test_equilibrium_report_is_short_and_ordered(nickel_report, nickel_record):
    info, path, pages = nickel_report
    points = nickel_record["equilibrium"]["mixtures"]
    assert len(points) >= 10  # the demo has 10 points: one section each made 52 pages
    assert info.page_count < 25
    order = list(info.sections)
    assert order.index("Equilibrium constant") == order.index("Measurement equation and inputs") + 1
    assert order.index("Equilibrium constant") < order.index("Uncertainty budget") \
        < order.index("Monte Carlo check")
    text = " ".join(pages)
    for m in points:  # no budget or Monte Carlo block of its own for any point
        assert f"K, {m['id']}" not in text, m["id"]
    for number, title in enumerate(info.sections, 1):
        assert f"{number} {title}" in text, title


@pytest.mark.slow
def test_first_page_headlines_the_combined_k_once(nickel_report, nickel_record):
    first = nickel_report[2][0]
    results = {r["name"]: r for r in nickel_record["results"]}
    for name in ("K, combined", "log10 K, combined"):
        r = results[name]
        value, big_u = round_gum(r["value"], r["expanded_uncertainty"])  # GUM 7.2.6
        assert f"{name} {value} {r['unit']} {big_u} {r['unit']}".replace("  ", " ") in first
        places = len(big_u.split(".")[1]) if "." in big_u else 0
        low, high = r["monte_carlo"]["interval"]
        assert f"[{low:.{places}f}, {high:.{places}f}]" in first
        if name == "K, combined":  # listed once, not again as a row of its own
            assert first.count(f"{value} {r['unit']} {big_u} {r['unit']}") == 1
    assert "formation constant K (combined)" not in first
    for m in nickel_record["equilibrium"]["mixtures"]:  # the points, listed compactly
        value, big_u = round_gum(m["K"], m["expanded_uncertainty"])
        assert re.search(rf"\b{re.escape(m['id'])} {value} {big_u} \[", first), m["id"]


@pytest.mark.slow
def test_equilibrium_section_has_the_record_numbers(nickel_report, nickel_record):
    info, _, pages = nickel_report
    eq = nickel_record["equilibrium"]
    section = section_text(pages, info, "Equilibrium constant")
    unit = eq["k_unit"]
    assert unit == "L/mol" and eq["concentration_unit"] in section
    cond = eq["conditions"]
    assert f"{cond['ionic_strength_mol_per_L']:g} mol/L" in section
    assert f"{cond['temperature_C']:g} °C" in section
    # combined K rounded by GUM 7.2.6, as in the record
    k = next(r for r in nickel_record["results"] if r["name"] == "K, combined")
    value, big_u = round_gum(k["value"], k["expanded_uncertainty"])
    assert f"{value} {unit}, U = {big_u} {unit}" in section
    # consistency test: the numbers the record holds (it was shown as a dash before)
    cons = eq["combined"]["consistency"]
    assert f"{cons['chi_square']:.4g}, {cons['dof']}" in section
    assert f"{cons['p_value']:.3g}" in section and f"{cons['birge_ratio']:.3g}" in section
    assert cons["verdict"] in section
    # ICE table: every point's totals, free concentrations and K
    for m in eq["mixtures"]:
        row = re.search(re.escape(m["id"]) + r" (mixture|series \w+) ((?:\S+ ){5})", section)
        assert row, m["id"]
        assert row.group(1) == ("series T" if m["id"].startswith("T.") else "mixture")
        shown = [float(v) for v in row.group(2).split()]
        expected = [m[key] for key in ("M_total", "L_total", "ML", "M_free", "L_free")]
        assert shown == pytest.approx(expected, rel=5e-4)  # four significant digits
    # trend, bias of complete complexation, joint fit, activity estimate
    assert eq["trend"]["message"] in section and f"{eq['trend']['p_value']:.3g}" in section
    bias = eq["complete_complexation_bias"]
    assert f"K {100 * abs(bias['K']):.1f} % too high" in section
    assert f"{bias['naive_K']:.4g} {unit}" in section
    assert f"repeated {bias['iterations']} times and converged" in section
    assert f"K = {eq['joint_fit']['K']:.5g} {unit}" in section
    assert "Activity correction: an estimate" in section
    assert f"about {eq['activity_estimate']['K_thermodynamic']:.0f} {unit}" in section  # ~2300


@pytest.mark.slow
def test_negative_weights_are_explained(nickel_report, nickel_record):
    info, _, pages = nickel_report
    weights = nickel_record["equilibrium"]["combined"]["weights"]
    negative = [m["id"] for m, w in zip(nickel_record["equilibrium"]["mixtures"], weights, strict=True) if w < 0]
    assert negative  # strongly correlated points: the demo has negative GLS weights
    section = section_text(pages, info, "Equilibrium constant")
    assert f"{len(negative)} of them are negative" in section
    assert f"({', '.join(negative)})" in section


@pytest.mark.slow
def test_equilibrium_figure_is_drawn(nickel_report):
    info, path, pages = nickel_report
    number = info.sections.index("Equilibrium constant") + 1
    pdf = PdfReader(str(path))
    with_caption = [i for i, p in enumerate(pages) if "Figure: K of every point" in p]
    assert with_caption
    assert any(pdf.pages[i].images for i in with_caption)
    assert any(f"{number} Equilibrium constant" in pages[i] for i in range(with_caption[0] + 1))


@pytest.mark.slow
def test_budget_and_monte_carlo_in_full_for_the_combined_k_only(nickel_report, nickel_record):
    info, _, pages = nickel_report
    budget = section_text(pages, info, "Uncertainty budget")
    results = {r["name"]: r for r in nickel_record["results"]}
    k, log_k = results["K, combined"], results["log10 K, combined"]
    value, _ = round_gum(k["value"], k["expanded_uncertainty"])
    assert budget.count("y = ") == 1 and f"y = {value} L/mol" in budget
    assert "every source has the same share" in budget  # log10 K: one line, same shares
    assert f"{log_k['standard_uncertainty']:.3g}" in budget
    for m in nickel_record["equilibrium"]["mixtures"]:  # one compact table of the points
        r = results[f"K, {m['id']}"]
        value, big_u = round_gum(r["value"], r["expanded_uncertainty"])
        assert re.search(rf"\b{re.escape(m['id'])} {value} \S+ {big_u} ", budget), m["id"]
    mc = section_text(pages, info, "Monte Carlo check")
    assert mc.count("trials (undefined results)") == 1


def test_log10_budget_shown_in_full_when_its_shares_differ(nickel_record, monkeypatch):
    monkeypatch.setattr(figures, "share_chart", lambda *a, **k: _tiny_png())  # text only
    record = copy.deepcopy(nickel_record)
    rows = [r for r in record["budget"] if r["result"] == "log10 K, combined"]
    rows[0]["share"] += 0.01  # no longer the shares of K: its own budget must be shown
    text = " ".join(p.getPlainText() for p in sections_study.budget(record)
                    if hasattr(p, "getPlainText"))
    assert "every source has the same share" not in text
    log_k = next(r for r in record["results"] if r["name"] == "log10 K, combined")
    value, _ = round_gum(log_k["value"], log_k["expanded_uncertainty"])
    assert f"y = {value} , u(y)" in text or f"y = {value}, u(y)" in text


def _tiny_png() -> bytes:
    """A 1x1 PNG, to skip drawing figures where a test reads only the text."""
    import io

    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    fig = Figure(figsize=(0.1, 0.1), dpi=10)
    FigureCanvasAgg(fig)
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png")
    return buffer.getvalue()


def test_the_content_hash_is_on_page_one_only_when_given(tmp_path):
    from validate.record.manifest import content_hash

    record = synthetic_record(3)
    digest = content_hash(record)
    build_report(record, tmp_path / "with.pdf", content_hash=digest)
    build_report(record, tmp_path / "without.pdf")
    first = pages_text(tmp_path / "with.pdf")[0].replace("\n", "")
    assert "content hash" in first and digest in first.replace(" ", "")
    assert "content hash" not in pages_text(tmp_path / "without.pdf")[0]


def page_fill(path) -> list[float]:
    """How far down each page its text reaches, as a fraction of the text frame (from the text
    positions pypdf reports; a figure's caption marks where the figure ends)."""
    from validate.report.style import MARGIN_BOTTOM, MARGIN_TOP

    fills = []
    for page in PdfReader(str(path)).pages:
        height = float(page.mediabox.height)
        top, bottom = height - MARGIN_TOP, MARGIN_BOTTOM
        heights: list[float] = []

        def visit(text, cm, tm, font, size, heights=heights, top=top, bottom=bottom):
            y = tm[5] * cm[3] + cm[5]
            if text.strip() and bottom - 2 < y < top + 2:  # leave out the running head and foot
                heights.append(y)

        page.extract_text(visitor_text=visit)
        fills.append((top - min(heights)) / (top - bottom) if heights else 0.0)
    return fills


@pytest.mark.slow
@pytest.mark.parametrize("which", ["phosphate", "nickel"])
def test_no_page_but_the_last_is_half_blank(which, demo_report, nickel_report):
    info, path, _ = demo_report if which == "phosphate" else nickel_report
    fills = page_fill(path)
    assert len(fills) == info.page_count
    assert all(f >= 0.5 for f in fills[:-1]), [round(f, 2) for f in fills]


@pytest.mark.slow
def test_the_assay_demo_report_with_its_annex_fits_fifteen_pages(demo_report):
    info, _, pages = demo_report
    assert "Annex: traceability to the raw data" in info.sections
    assert info.page_count <= 15  # issue target for the phosphate demo, annex included


@pytest.mark.slow
def test_equilibrium_annex_has_the_standards_line_and_every_point_total(nickel_report, nickel_record):
    info, _, pages = nickel_report
    annex = section_text(pages, info, "Annex: traceability to the raw data")
    assert "The standards' line" in annex and "residuals" in annex
    fit = nickel_record["validation"]["fit"]
    assert f"a = {fit['intercept']:.7g}" in annex and f"b = {fit['slope']:.7g}" in annex
    for t in nickel_record["traceability"]["totals"]:  # every standard, mixture and series point
        value, u = round_gum(t["L_total"], t["u_L_total"])
        pattern = rf"\b{re.escape(t['id'])} {t['role']} .*?{re.escape(value)} \({re.escape(u)}\)"
        assert re.search(pattern, annex), t["id"]
