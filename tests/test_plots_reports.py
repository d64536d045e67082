"""Figures and reports a user would put in a paper (issue 17): every plot function is rendered on a small
mock and checked through its matplotlib objects (labels with units, inverted magnitude axes, legends that
cover no data, colour bars labelled, no contour stripes); the rounding helper and the report tables are
checked on their content."""
import dataclasses
import json
import re

import numpy as np
import pytest

from hbmodel.outputs import plots
from hbmodel.cli.main import main
from hbmodel.inference.mass_loss_fit import MassLossFit, Priors
from hbmodel.observation.mock import ObservationSpec, make_mock
from hbmodel.io.figures import (COLUMN_WIDTH_IN, OKABE_ITO, PAGE_WIDTH_IN, format_feh, legend_of, new_figure,
                                points_under_legend)
from hbmodel.populations.population import MassLoss, Population
from hbmodel.core.quantities import axis_label
from hbmodel.outputs.reports import (_comparison_lines, distance_error_budget, distance_report, fit_report,
                             format_interval, format_value, lf_failed_components, lf_warning, markdown_table)

GC = dict(feh=-1.6, age=12.5, alpha=0.3)      # metal-poor globular cluster: blue-to-red HB, RR Lyrae
RC = dict(feh=0.0, age=3.0, alpha=0.0)        # intermediate-age metal-rich cluster: a red clump


def _mock(case, n_hb=200, seed=7, bands=("V", "I")):
    pop = Population(case["feh"], case["age"], alpha_fe=case["alpha"], mass_loss=MassLoss.from_eta(0.45, 0.03))
    return make_mock(pop, bands=bands, rng=np.random.default_rng(seed), n_hb=n_hb,
                     obs=ObservationSpec(distance_modulus=15.0, ebv=0.05, depth={"V": 22.5, "I": 21.8}))


def _legend_is_clear(ax, leg, x, y):
    """True when the legend covers none of the points or sits outside the axes."""
    ax.figure.canvas.draw()
    r = ax.figure.canvas.get_renderer()
    lb, ab = leg.get_window_extent(r), ax.get_window_extent(r)
    outside = lb.x0 >= ab.x1 - 1 or lb.x1 <= ab.x0 + 1 or lb.y0 >= ab.y1 - 1 or lb.y1 <= ab.y0 + 1
    return outside or points_under_legend(ax, leg, x, y, r) == 0


@pytest.fixture(scope="module")
def gc_mock():
    return _mock(GC)


@pytest.fixture(scope="module")
def fitted():
    """A quick Laplace fit of a small globular-cluster mock (the plot and report inputs)."""
    pop = Population(GC["feh"], GC["age"], alpha_fe=GC["alpha"], mass_loss=MassLoss.from_delta_m(0.19, 0.02))
    cat = make_mock(pop, bands=("V", "I"), rng=np.random.default_rng(3), n_hb=150,
                    obs=ObservationSpec(distance_modulus=15.0, ebv=0.05, depth={"V": 22.5, "I": 21.8}))
    est = MassLossFit(Population(GC["feh"], GC["age"], alpha_fe=GC["alpha"]),
                      Priors(distance_modulus=(15.0, 0.05), ebv=(0.05, 0.01)), sampler="laplace",
                      compare_models=False, seed=1)
    return est.fit(cat)


# ------------------------------------------------------------------------------------ rounding helper
@pytest.mark.parametrize("args,expected", [
    ((15.3, 0.0309, 0.0305), "15.300 +0.031/−0.031"),     # the example
    ((0.1830, 0.0023, 0.0022), "0.1830 +0.0023/−0.0022"),
    ((13.48228, 0.0043), "13.4823 ± 0.0043"),              # one error: ±; not coarser than the error
    ((1.0, 0.0996, 0.2), "1.00 +0.10/−0.20"),              # 0.0996 rounds up to 0.10, not 0.100
    ((1234.5, 120.0, 130.0), "1230 +120/−130"),            # errors above 10: tens
    ((-0.0001, 0.01, 0.01), "0.000 +0.010/−0.010"),        # never "-0.000"
    ((15.3, None, None), "15.3"),                          # no usable error: 4 significant figures
    ((15.3, float("nan"), 0.0), "15.3"),
    ((None,), "—"),
])
def test_format_value_rounds_to_two_significant_figures_of_the_error(args, expected):
    assert format_value(*args) == expected


def test_format_interval_uses_the_16_84_percent_distances():
    assert format_interval({"median": 15.3, "lo": 15.3 - 0.0305, "hi": 15.3 + 0.0309}) == "15.300 +0.031/−0.031"
    assert format_interval({"median": None, "lo": None, "hi": None}) == "—"


def test_format_feh_has_no_negative_zero():
    # regression: the clump-grid legend read "[Fe/H] = -0.0" for a grid node at -1e-16
    assert format_feh(-1e-16) == "[Fe/H] = 0.00"
    assert format_feh(-0.2) == "[Fe/H] = -0.20" and format_feh(0.2) == "[Fe/H] = +0.20"


def test_axis_labels_carry_units():
    assert axis_label("distance_modulus").endswith("[mag]")
    assert axis_label("mass_loss").endswith(r"[$M_\odot$]")
    assert axis_label("age").endswith("[Gyr]")
    assert "[" not in axis_label("field_fraction")  # dimensionless: no empty brackets


# ------------------------------------------------------------------------------------ CMD and LF
def test_mock_cmd_has_units_inverted_magnitudes_and_a_clear_legend(gc_mock):
    fig, ax = plots.plot_cmd(gc_mock, "V", ("V", "I"))
    assert ax.get_xlabel() == "V − I [mag]" and ax.get_ylabel() == "V [mag]"
    assert ax.yaxis_inverted()
    c = np.asarray(gc_mock["V"]) - np.asarray(gc_mock["I"])
    m = np.asarray(gc_mock["V"])
    assert _legend_is_clear(ax, ax.get_legend(), c, m)
    # regression (issue 17): the fixed upper-right legend covered upper-RGB stars; the check above fails there
    _, ax2 = plots.plot_cmd(gc_mock, "V", ("V", "I"))
    leg = ax2.legend(loc="upper right", markerscale=2.5)
    assert not _legend_is_clear(ax2, leg, c, m)
    assert fig.get_size_inches()[0] == pytest.approx(COLUMN_WIDTH_IN)


def test_clump_population_is_labelled_red_clump_and_a_globular_cluster_hb(gc_mock):
    # regression: every core-helium burner was labelled "HB / clump" whatever the population
    _, ax = plots.plot_cmd(_mock(RC), "V", ("V", "I"))
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert "red clump" in labels and "HB" not in labels
    _, ax = plots.plot_cmd(gc_mock, "V", ("V", "I"))
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert "HB" in labels and "RR Lyrae" in labels and "red clump" not in labels


def test_catalogue_without_phases_is_one_labelled_colour(gc_mock):
    cat = gc_mock["V", "V_err", "I", "I_err"]
    _, ax = plots.plot_cmd(cat, "V", ("V", "I"))
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert labels == [f"catalogue (N = {len(cat)})"]


def test_one_band_has_no_cmd_but_a_luminosity_function(tmp_path):
    # regression: a one-band --plot drew an "I − I" diagram
    t = _mock(RC, bands=("I",))
    with pytest.raises(ValueError, match="two bands"):
        plots.plot_cmd(t, "I", ("I", "I"))
    _, ax = plots.plot_luminosity_function(t, "I")
    assert ax.get_xlabel() == "I [mag]" and ax.xaxis_inverted() and "mag" in ax.get_ylabel()
    labels = [tx.get_text() for tx in ax.get_legend().get_texts()]
    assert "red clump" in labels
    out = tmp_path / "lf.png"
    assert main(["mock", "--feh", "0", "--age", "3", "--eta", "0.3", "--n-hb", "80", "--bands", "I",
                 "--seed", "1", "--out", str(tmp_path / "m.ecsv"), "--plot", str(out)]) == 0
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_hb_type_grid_axes_and_series_labels():
    from astropy.table import Table
    t = Table({"series": ["age"] * 6, "series_value": [11.0] * 3 + [13.0] * 3,
               "hb_type": [-1.0, 0.0, 0.8, -1.0, -0.5, 0.9], "feh": [-0.8, -1.5, -2.2] * 2})
    _, ax = plots.plot_hb_type_grid(t)
    assert ax.get_ylabel() == "[Fe/H] [dex]" and "HB type" in ax.get_xlabel()
    assert [x.get_text() for x in ax.get_legend().get_texts()] == ["age = 11 Gyr", "age = 13 Gyr"]
    assert _legend_is_clear(ax, ax.get_legend(), t["hb_type"], t["feh"])


def test_clump_grid_legend_formats_feh_and_names_eta():
    from astropy.table import Table
    feh = np.repeat([-0.2, -1e-16, 0.2], 3)
    t = Table({"feh": feh, "age_gyr": np.tile([2.0, 5.0, 10.0], 3), "M_I": np.linspace(-0.4, -0.1, 9)})
    _, ax = plots.plot_clump_grid(t, "I", eta=0.3)
    labels = [x.get_text() for x in ax.get_legend().get_texts()]
    assert labels == ["[Fe/H] = -0.20", "[Fe/H] = 0.00", "[Fe/H] = +0.20"]
    assert "η = 0.3" in ax.get_title() and ax.get_xlabel() == "age [Gyr]" and "[mag]" in ax.get_ylabel()
    assert ax.yaxis_inverted()


# ------------------------------------------------------------------------------------ clump LF
@pytest.fixture(scope="module")
def clump_lf():
    from hbmodel.inference.clump_lf import fit_clump_lf
    from hbmodel.cli.demo import _catalog
    m = np.asarray(_catalog("corvid_east.ecsv")["Ks"], float)
    return m, fit_clump_lf(m)


def test_clump_lf_plot_names_band_and_draws_the_bump_on_the_background(clump_lf):
    m, r = clump_lf
    fig, ax = plots.plot_clump_lf(m, r, band="Ks", title="demo")
    assert ax.get_xlabel() == "Ks [mag]" and ax.get_ylabel().startswith("stars per")
    lines = {ln.get_label(): ln for ln in ax.lines}
    bump = next(v for k, v in lines.items() if k.startswith("RGB bump"))
    bg = lines["RGB background"]
    # regression: the bump was a flat zero line; now it sits on the background and rises above it
    assert np.all(bump.get_ydata() >= bg.get_ydata() - 1e-9) and np.max(bump.get_ydata() - bg.get_ydata()) > 1
    assert _legend_is_clear(ax, legend_of(ax), *_hist_points(ax))
    assert legend_of(ax).get_title().get_text() == ""  # a clean fit has no failure note


def _hist_points(ax):
    xy = ax.patches[0].get_xy()
    return xy[:, 0], xy[:, 1]


def test_unclean_lf_fit_names_the_failed_component(clump_lf):
    m, r = clump_lf
    bad = dataclasses.replace(r, converged=False, param_errors=dict(r.param_errors, bump_ratio=float("nan")))
    assert lf_failed_components(bad) == ["RGB bump"]
    assert lf_failed_components(r) == []
    w = lf_warning(bad)
    assert "RGB bump" in w and "curvature" in w
    boot = dataclasses.replace(bad, boot_peaks=np.zeros(60), peak_mag_err_boot=0.005)
    assert "bootstrap of 60 refits" in lf_warning(boot)
    assert lf_warning(r) is None
    _, ax = plots.plot_clump_lf(m, bad, band="Ks")
    assert "RGB bump" in legend_of(ax).get_title().get_text()
    assert _legend_is_clear(ax, legend_of(ax), *_hist_points(ax))


def test_bump_on_its_bound_is_named_alone(clump_lf):
    # regression (the README's Tern-South field): bump_ratio = 0 on its bound made the Hessian singular, so
    # every error was NaN and every component was called failed; the bound parameter is the cause
    m, r = clump_lf
    nan = {k: float("nan") for k in r.param_errors}
    bad = dataclasses.replace(r, converged=False, param_errors=nan, params=dict(r.params, bump_ratio=0.0))
    assert lf_failed_components(bad) == ["RGB bump"]
    assert "bump_ratio = 0 on the bound" in lf_warning(bad)


# ------------------------------------------------------------------------------------ fit figures
def test_fit_cmd_model_density_has_no_stripes(fitted):
    from matplotlib.collections import QuadMesh
    from matplotlib.contour import ContourSet
    _, ax = plots.plot_fit_cmd(fitted)
    assert any(isinstance(c, QuadMesh) for c in ax.collections)        # the filled density image
    cs = [c for c in ax.collections if isinstance(c, ContourSet)]
    assert len(cs) == 1
    # regression: contours of the unsmoothed midpoint model broke into ladders of small closed pieces
    # (dozens per level); the smoothed bin-integrated density gives a handful of closed curves per level
    pieces = [int(np.sum(p.codes == 1)) if p.codes is not None else 1 for p in cs[0].get_paths()]
    assert 1 <= max(pieces) <= 12, pieces
    assert ax.get_xlabel() == "V − I [mag]" and ax.get_ylabel() == "V [mag]" and ax.yaxis_inverted()
    assert _legend_is_clear(ax, ax.get_legend(), fitted.data_["colour"], fitted.data_["mag"])


def test_hess_colour_bars_are_labelled(fitted):
    fig, axes = plots.plot_fit_hess(fitted)
    cbar_labels = [a.get_ylabel() for a in fig.axes if a not in list(axes)]
    assert len(cbar_labels) == 3 and all(cbar_labels)
    assert "√model" in cbar_labels[2]
    assert axes[0].get_ylabel() == "V [mag]" and axes[0].yaxis_inverted()
    assert fig.get_size_inches()[0] == pytest.approx(PAGE_WIDTH_IN)


def test_corner_has_units_medians_quantiles_and_truth(fitted):
    truth = {"mass_loss": 0.19, "distance_modulus": 15.0, "ebv": 0.05}
    fig, axes = plots.plot_corner(fitted, truth=truth)
    keys = [k for k in ("mass_loss", "mass_loss_sd", "distance_modulus", "ebv", "field_fraction")
            if k in fitted.posterior_ and np.std(fitted.posterior_[k]) > 0]
    assert axes.shape == (len(keys), len(keys))
    for i, k in enumerate(keys):
        ax = axes[i, i]
        x = np.asarray(fitted.posterior_[k])
        xs = sorted(ln.get_xdata()[0] for ln in ax.lines)
        want = list(np.percentile(x, [16, 50, 84])) + ([truth[k]] if k in truth else [])
        assert np.allclose(xs, sorted(want)), k
        title = ax.get_title() or ax.get_title(loc="right")  # the last panel's title sits right-aligned
        assert "+" in title and "/" in title, (k, title)  # the rounded median +upper/-lower
        assert axes[-1, i].get_xlabel() == axis_label(k)
    assert "[mag]" in axes[-1, keys.index("distance_modulus")].get_xlabel()
    labels = [t.get_text() for t in fig.legends[0].get_texts()]
    assert labels == ["truth", "median", "16 / 84 %"]


def test_hb_mass_label_is_not_cut_off(fitted):
    fig, ax = plots.plot_hb_mass(fitted, truth={"hb_mass_mean": 0.65})
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    fb = fig.bbox
    for label in (ax.xaxis.label, ax.yaxis.label):
        bb = label.get_window_extent(r)
        assert bb.x0 >= fb.x0 and bb.x1 <= fb.x1 and bb.y0 >= fb.y0 and bb.y1 <= fb.y1, label.get_text()
    assert r"M_\odot" in ax.get_xlabel()
    assert any(ln.get_label() == "true mean" for ln in ax.lines)


def test_posterior_predictive_panel_compares_observed_counts(fitted):
    fig, axes = plots.plot_posterior_predictive(fitted, p_value=0.4, n_draws=20)
    assert axes[0].get_xlabel() == "V [mag]" and axes[0].xaxis_inverted()
    assert axes[1].get_xlabel() == "V − I [mag]"
    obs = next(ln for ln in axes[0].lines if ln.get_label() == "observed")
    # the observed step line holds every star in the region (each bin twice)
    assert obs.get_ydata().sum() / 2 == pytest.approx(fitted.n_stars_)
    assert "p = 0.40" in fig._suptitle.get_text()


def test_palette_is_okabe_ito():
    fig, ax = new_figure()
    line, = ax.plot([0, 1], [0, 1])
    assert line.get_color().lower() == OKABE_ITO["blue"].lower()


# ------------------------------------------------------------------------------------ reports
def test_markdown_table_shape():
    lines = markdown_table(["a", "b"], [["x", 1], ["y", 2.5]])
    assert lines == ["| a | b |", "|---|---|", "| x | 1 |", "| y | 2.5 |"]


def test_fit_report_tables_units_region_and_goodness_of_fit_first(fitted):
    res = fitted.result()
    res["warnings"] = ["test warning"]
    text = fit_report(fitted, res, title="t", inputs={"catalog": "c.ecsv"}, plots=["cmd.png"])
    # warnings, goodness of fit and the fitted region come before the results table
    i_warn, i_gof, i_reg, i_res = (text.index(s) for s in ("test warning", "Goodness of fit", "Fitted region",
                                                            "## Results"))
    assert i_warn < i_res and i_gof < i_res and i_reg < i_res
    ml = res["mass_loss"]
    row = next(ln for ln in text.splitlines() if ln.startswith("| mean RGB mass loss ΔM |"))
    assert row == f"| mean RGB mass loss ΔM | {format_interval(ml)} | Msun |"
    assert "| distance modulus (m − M)0 |" in text and "| mag |" in text
    priors = text[text.index("## Priors"):text.index("## Convergence")]
    assert "| parameter | type | prior | unit |" in priors
    assert re.search(r"\| mean RGB mass loss ΔM \| uniform \| \[0, [0-9.]+\] \| Msun \|", priors)
    assert "| distance modulus (enters the shifts) | Gaussian | mean 15, sd 0.05 | mag |" in priors
    assert "![cmd.png](cmd.png) ([PDF](cmd.pdf))" in text
    assert "{" not in text  # no raw dict / JSON anywhere


def test_convergence_table_prints_integer_n_eff():
    from hbmodel.outputs.reports import _convergence_lines
    lines = _convergence_lines({"autocorr_time": {"mass_loss": 23.19, "field_fraction": float("nan")},
                                "n_eff": 901.5360201049666, "acceptance": 0.39, "n_steps": 1500,
                                "converged": False}, "emcee")
    text = "\n".join(lines)
    assert "| effective independent draws n_eff | 902 |" in text   # regression: 901.5360201049666
    assert "| mean RGB mass loss ΔM | 23.2 | 65 |" in text and "| field fraction | — | — |" in text


def test_model_comparison_is_a_table():
    mc = {"criterion": "BIC", "preferred": "spread", "runner_up": "both", "delta_bic": 7.0, "strength": "strong",
          "preferred_aic": "spread",
          "models": {"spread": {"max_log_likelihood": -100.0, "n_params": 5, "bic": 230.0, "aic": 210.0},
                     "both": {"max_log_likelihood": -99.0, "n_params": 7, "bic": 237.0, "aic": 212.0}}}
    text = "\n".join(_comparison_lines(mc))
    assert "| model | parameters | max ln L | BIC | ΔBIC | AIC |" in text
    assert "| spread (preferred) | 5 | -100.0 | 230.0 | 0.0 | 210.0 |" in text
    assert "| both | 7 | -99.0 | 237.0 | 7.0 | 212.0 |" in text


def test_fit_text_summary_rounds_and_prints_integer_n_eff(tmp_path, capsys, fitted):
    cat = tmp_path / "cat.ecsv"
    pop = Population(0.0, 8.0, mass_loss=MassLoss.from_delta_m(0.10, 0.01))
    make_mock(pop, bands=("V", "I"), rng=np.random.default_rng(3), n_hb=200,
              obs=ObservationSpec(distance_modulus=15.0, ebv=0.05, depth={"V": 22.5, "I": 21.8})).write(cat)
    assert main(["fit", str(cat), "--bands", "V,I", "--feh", "0.0", "--age", "8", "--distance-modulus", "15",
                 "--dm-sd", "0.05", "--ebv", "0.05", "--ebv-sd", "0.01", "--sampler", "laplace",
                 "--no-compare"]) == 0
    out = capsys.readouterr().out
    row = next(ln for ln in out.splitlines() if ln.strip().startswith("mass_loss "))
    assert re.fullmatch(r"\s+mass_loss\s+\d\.\d+ \+\d\.\d+/−\d\.\d+ Msun", row), row
    assert re.search(r"Laplace approximation at the MAP \(\d+ draws\)", out), out   # an integer, no chain talk


def test_distance_report_splits_errors_and_names_every_input(tmp_path, capsys):
    from hbmodel.inference.clump_distance import CALIBRATION_SD_MAG
    from hbmodel.cli.demo import _catalog
    cat = tmp_path / "field.ecsv"
    _catalog("corvid_east.ecsv").write(cat)
    out = tmp_path / "d"
    assert main(["distance", str(cat), "--band", "Ks", "--colour", "J-Ks", "--reddening-from-colour",
                 "--feh", "0.0", "--feh-sd", "0.1", "--age", "4", "--age-sd", "1", "--eta", "0.3",
                 "--out", str(out)]) == 0
    text = (out / "report.md").read_text()
    res = json.loads((out / "result.json").read_text())
    assert re.search(r"± [0-9.]+ \(stat\) ± [0-9.]+ \(sys\) mag", text)
    # the clump peak keeps the decimals its error needs (regression: 13.48 for an error of 0.004)
    assert f"| observed clump peak Ks | {format_value(res['clump_peak_mag'], res['clump_peak_mag_err'])} | mag |" \
        in text
    for needle in ("0 ± 0.1 (--feh-sd)", "4 ± 1 (--age-sd)", "| Reimers η (mass loss of the clump model) | 0.3 |",
                   "F99, R_V = 3.1", "from the clump colour J-Ks", f"| clump calibration σ [mag] | {CALIBRATION_SD_MAG:g} |"):
        assert needle in text, needle
    assert (out / "lf.png").exists() and (out / "lf.pdf").exists() and (out / "report.html").exists()
    eb = res["error_budget_mag"]
    assert eb["statistical"] == pytest.approx(np.hypot(eb["clump_peak"], eb["reddening"]))
    assert eb["systematic"] == pytest.approx(np.hypot(eb["calibration"], eb["population"]))
    assert f"± {eb['statistical']:.3f} (stat) ± {eb['systematic']:.3f} (sys) mag" in text
    # budget: the population term comes from --feh-sd/--age-sd and is systematic, next to the calibration
    sys_row = next(ln for ln in text.splitlines() if ln.startswith("| **systematic total**"))
    pop_row = next(ln for ln in text.splitlines() if ln.startswith("| population"))
    assert float(pop_row.split("|")[2]) > 0 and float(sys_row.split("|")[2]) > CALIBRATION_SD_MAG
    capsys.readouterr()


def test_error_budget_adds_up():
    from hbmodel.inference.clump_distance import CALIBRATION_SD_MAG, DistanceResult

    class _LF:
        peak_mag_err_boot = None
    r = DistanceResult("Ks", {}, {}, 12.4, 0.004, -1.55, float(np.hypot(CALIBRATION_SD_MAG, 0.03)), 0.0, 0.3,
                       0.04, 0.12, 3000, _LF())
    eb = distance_error_budget(r)
    assert eb["population"] == pytest.approx(0.03) and eb["calibration"] == CALIBRATION_SD_MAG
    assert eb["reddening"] == pytest.approx(0.12 / 0.3 * 0.04)
    assert eb["total"] == pytest.approx(np.sqrt(0.004 ** 2 + 0.016 ** 2 + 0.05 ** 2 + 0.03 ** 2))


def test_report_for_demo_distance_has_no_bare_floats(clump_lf):
    """Every number in the distance report has at most the decimals its error supports."""
    from hbmodel.inference.clump_distance import measure_distance
    from hbmodel.cli.demo import _catalog
    t = _catalog("corvid_east.ecsv")
    pop = Population.from_history(np.geomspace(1, 10, 8), np.gradient(np.geomspace(1, 10, 8)), 0.0,
                                  mass_loss=MassLoss.from_eta(0.3, 0.03))
    res = measure_distance(np.asarray(t["Ks"]), pop, "Ks", ebv=0.3, ebv_sd=0.02)
    text = distance_report(res, title="x", inputs={"band": "Ks"})
    assert not re.search(r"\d\.\d{6,}", text)   # no 15-digit floats
    assert "No warnings" in text


def test_batch_summary_panels_carry_units():
    # regression: summary.png labelled its panels with bare column names
    from astropy.table import Table

    from hbmodel.io.jobs import summary_figure
    t = Table({"name": ["f1", "f2"], "status": ["done", "done"], "reason": ["", ""],
               "distance_modulus": [13.8, 14.1], "distance_modulus_lo": [13.75, 14.0],
               "distance_modulus_hi": [13.85, 14.2], "ebv": [0.3, 0.35], "distance_kpc": [5.8, 6.6]})
    fig = summary_figure(t)
    labels = [ax.get_ylabel() for ax in fig.axes]
    assert labels == [axis_label("distance_modulus"), axis_label("ebv"), axis_label("distance_kpc")]
    assert all(lb.endswith(("[mag]", "[kpc]")) for lb in labels)


def test_html_report_is_one_offline_file(tmp_path):
    from hbmodel.io.figures import save_figure
    from hbmodel.outputs.reports import markdown_to_html, write_report
    fig, ax = new_figure()
    ax.plot([0, 1], [0, 1])
    save_figure(fig, tmp_path / "f.png", pdf=False)
    md = "\n".join(["# T", "", "**No warnings.**", ""] + markdown_table(["a", "b"], [["x", "1 <2"]])
                   + ["", "- item `code`", "", "![f.png](f.png) ([PDF](f.pdf))"])
    write_report(tmp_path / "report.md", None, text=md)
    html = (tmp_path / "report.html").read_text()
    assert html == markdown_to_html(md, tmp_path)
    assert "<table><thead><tr><th>a</th><th>b</th></tr></thead><tbody><tr><td>x</td><td>1 &lt;2</td></tr>" in html
    assert "---" not in html and "<li>item <code>code</code></li>" in html and "<b>No warnings.</b>" in html
    # the figure is embedded, not linked: the page needs no other file
    assert 'src="data:image/png;base64,' in html and 'src="f.png"' not in html
