"""``hbmodel fit --counts``: eta, its spread and helium from catalogue numbers (hbmodel.inference.counts_fit)."""
from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pytest

from hbmodel.inference.counts_fit import (ClusterCounts, CountsEmulator, _log_p_diff, counts_from_rows, fit_counts,
                                hierarchical_eta, sbc_counts, simulate_counts)
from hbmodel.populations.population import MassLoss, Population


def _cli(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "hbmodel", *args], capture_output=True, text=True, cwd=cwd,
                          env={"OMP_NUM_THREADS": "1", "PATH": "/usr/bin:/bin"})


# --------------------------------------------------------------------------- emulator
@pytest.mark.parametrize("eta, sd, f_he, dy", [(0.45, 0.03, 0.0, 0.0), (0.60, 0.05, 0.0, 0.0),
                                               (0.50, 0.02, 0.35, 0.06)])
def test_emulator_reproduces_predict(eta, sd, f_he, dy):
    """The emulator is Population.predict re-summed: HB fractions within 0.015, the mean RRab period within
    0.005 d, the mean loss within 0.002 Msun (the B:V:R definition is Lee 1990, ApJ 363, 159)."""
    emu = CountsEmulator(-1.5, 0.3, [12.5], helium=f_he > 0)
    o = emu.observables(eta, sd, f_he, dy)
    p = Population(-1.5, 12.5, alpha_fe=0.3, mass_loss=MassLoss.from_eta(eta, sd),
                   helium_enriched_fraction=f_he, helium_delta_y=dy).predict(bands=("V",))
    for k_emu, k_pred in (("fraction_blue", "fraction_blue"), ("fraction_var", "fraction_rr"),
                          ("fraction_red", "fraction_red")):
        assert o[k_emu][0] == pytest.approx(p[k_pred], abs=0.015), k_emu
    assert o["pab_mean"][0] == pytest.approx(p["rrab_period_mean"], abs=0.005)
    assert o["mass_loss"][0] == pytest.approx(p["mass_loss"], abs=0.002)


def test_emulator_follows_the_second_parameter_of_age():
    """At fixed eta an older cluster has a bluer HB (lower tip mass; Lee, Demarque & Zinn 1994, ApJ 423, 248):
    the age-interpolated emulator must show it, and between nodes stay between the node values."""
    emu = CountsEmulator(-1.6, 0.3, [11.0, 12.0, 13.0])
    ratio = emu.observables(np.full(3, 0.42), 0.04, age_gyr=np.array([11.0, 12.0, 13.0]))["hb_ratio"]
    assert ratio[0] < ratio[1] < ratio[2]
    mid = emu.observables(0.42, 0.04, age_gyr=11.5)["hb_ratio"][0]
    assert ratio[0] <= mid <= ratio[1]


def test_emulator_r_parameter_and_blue_tail_match_the_model():
    """R = N_HB/N_RGB (Iben 1968, Nature 220, 143; Buzzoni et al. 1983) from predict within 1 %, and the
    99th percentile of the HB-time distribution of log Teff (the hottest of ~100 HB stars) within 2 %."""
    from hbmodel.inference.counts_fit import _blue_tail_logteff
    from hbmodel.populations.morphology import weighted_quantile
    emu = CountsEmulator(-1.5, 0.3, [12.5], teff_hist=True, rgb=True)
    for eta in (0.45, 0.6):
        o = emu.observables(eta, 0.03, hist=True)
        pop = Population(-1.5, 12.5, alpha_fe=0.3, mass_loss=MassLoss.from_eta(eta, 0.03))
        assert o["r_parameter"][0] == pytest.approx(pop.predict(bands=("V",))["r_parameter"], rel=0.01)
        st = pop.model_stars()
        hb = st.phase == "hb"
        t99 = 10 ** weighted_quantile(st.logteff[hb], st.weight[hb], 0.99)
        assert 10 ** _blue_tail_logteff(o["logteff_hist"], 0.99)[0] == pytest.approx(t99, rel=0.02)


def test_r_parameter_and_blue_tail_enter_the_fit():
    """An HB ratio alone at [Fe/H] -1.5 leaves eta and its spread degenerate; the hottest HB star (the extent
    of the blue tail) breaks the degeneracy: the fit with it recovers the injected eta = 0.60."""
    from hbmodel.inference.counts_fit import _blue_tail_logteff
    emu = CountsEmulator(-1.5, 0.3, [12.5], teff_hist=True, rgb=True)
    o = emu.observables(0.60, 0.03, hist=True)
    n_hb = 300
    tail = float(10 ** _blue_tail_logteff(o["logteff_hist"], 1 - 1 / (n_hb + 1))[0])
    c = ClusterCounts("Sandpiper-2", -1.5, hb_ratio=round(float(o["hb_ratio"][0]), 2), n_hb=n_hb,
                      n_rgb=round(n_hb / float(o["r_parameter"][0])), hb_blue_tail_teff=tail, seed=2)
    fit = fit_counts(c, max_steps=3000, emulator=emu)
    eta = fit.samples[:, fit.names.index("eta")]
    assert abs(np.median(eta) - 0.60) < 2.5 * np.std(eta)
    alone = fit_counts(ClusterCounts("Sandpiper-2", -1.5, hb_ratio=c.hb_ratio, n_hb=n_hb, seed=2), max_steps=3000,
                       emulator=emu)
    assert np.std(eta) < np.std(alone.samples[:, 0]) / 3


# --------------------------------------------------------------------------- likelihood
def test_exact_hb_ratio_likelihood_matches_the_multinomial():
    """P(B - R = d) summed from the multinomial pmf of scipy (reference library) for n = 7."""
    from scipy.stats import multinomial
    n, p = 7, np.array([0.5, 0.3, 0.2])
    ref = {}
    for b in range(n + 1):
        for r in range(n + 1 - b):
            ref[b - r] = ref.get(b - r, 0.0) + multinomial.pmf([b, n - b - r, r], n, p)
    d = np.array(sorted(ref), float)
    got = np.exp(_log_p_diff(d, n, np.full(d.size, p[0]), np.full(d.size, p[1]), np.full(d.size, p[2])))
    np.testing.assert_allclose(got, [ref[int(x)] for x in d], rtol=1e-10)
    assert got.sum() == pytest.approx(1.0, abs=1e-12)


# --------------------------------------------------------------------------- fits on injected truth
def test_fit_recovers_injected_eta_and_spread():
    """Counts drawn from predict (eta = 0.45, sigma_eta = 0.04, 600 HB stars) -> the posterior holds the truth
    within 3 sigma and pins eta to better than 0.03."""
    rng = np.random.default_rng(7)
    c = simulate_counts("Sandpiper-9", -1.6, 0.45, 0.04, rng, n_hb=600)
    fit = fit_counts(c, max_steps=3000)
    eta = fit.samples[:, fit.names.index("eta")]
    sd = fit.samples[:, fit.names.index("eta_sd")]
    assert abs(np.median(eta) - 0.45) < 3 * np.std(eta)
    assert abs(np.median(sd) - 0.04) < 3 * np.std(sd)
    assert np.std(eta) < 0.03
    assert fit.converged and 0.01 < fit.p_value < 0.99
    s = fit.summary()
    assert s["eta"]["lo"] < s["eta"]["median"] < s["eta"]["hi"]


def test_saturated_blue_hb_gives_a_lower_limit_and_says_so():
    """An HB with only blue stars (HB ratio +1) constrains eta from below only."""
    c = ClusterCounts("Tern-West", -1.5, n_blue=150, n_var=0, n_red=0, seed=3)
    fit = fit_counts(c, max_steps=2000)
    assert any("HB ratio saturated at +1: only a lower limit on eta" in w for w in fit.warnings)
    eta = fit.samples[:, 0]
    # a blue-saturated HB at [Fe/H] -1.5 needs eta well above that of an intermediate HB (~0.45)
    assert np.percentile(eta, 5) > 0.5
    red = fit_counts(ClusterCounts("Tern-Red", -1.5, n_blue=0, n_var=0, n_red=150, seed=3), max_steps=2000)
    assert any("saturated at -1: only an upper limit" in w for w in red.warnings)
    assert np.percentile(red.samples[:, 0], 95) < 0.45


@pytest.mark.slow
def test_helium_model_prefers_enrichment_for_a_blue_tail_of_a_red_hb():
    """A red HB with a separate blue component (bimodal HB at fixed eta) is the classic signature of a
    helium-enriched fraction (D'Antona & Caloi 2004, ApJ 611, 871): the helium model finds f_He > 0."""
    rng = np.random.default_rng(11)
    pop = Population(-1.1, 12.5, alpha_fe=0.3, mass_loss=MassLoss.from_eta(0.40, 0.02),
                     helium_enriched_fraction=0.3, helium_delta_y=0.10).predict(bands=("V",))
    b, v, r = rng.multinomial(800, np.clip([pop["fraction_blue"], pop["fraction_rr"], pop["fraction_red"]], 0, 1))
    fit = fit_counts(ClusterCounts("Tern-South", -1.1, n_blue=b, n_var=v, n_red=r, seed=1), "helium",
                     max_steps=4000)
    f_he = fit.samples[:, fit.names.index("helium_fraction")]
    assert np.percentile(f_he, 2.5) > 0.05


def test_hierarchical_summary_recovers_population_mean_and_scatter():
    """30 invented clusters with eta ~ N(0.48, 0.07) (the scale of McDonald & Zijlstra 2015, MNRAS 448, 502)
    measured with 0.03 errors: the reweighted population mean and scatter hold the truth in their 2-sigma
    intervals."""
    rng = np.random.default_rng(3)
    true = rng.normal(0.48, 0.07, 30)
    obs = true + rng.normal(0, 0.03, 30)
    samples = [rng.normal(o, 0.03, 2000) for o in obs]
    h = hierarchical_eta(samples)
    for key, truth in (("mu", 0.48), ("tau", 0.07)):
        iv = h[key]
        half = 0.5 * (iv["hi"] - iv["lo"])
        assert abs(iv["median"] - truth) < 2 * half, (key, iv)
    assert h["tau"]["median"] > 0.03  # the scatter is not the measurement error


# --------------------------------------------------------------------------- input and command line
def test_unknown_column_names_the_nearest_valid_one():
    with pytest.raises(ValueError, match="unknown column 'fe_h'.*did you mean 'feh'"):
        counts_from_rows([{"name": "Kestrel-7", "fe_h": -1.5, "n_blue": 1, "n_var": 2, "n_red": 3}])
    with pytest.raises(ValueError, match="exactly one of n_hb"):
        counts_from_rows([{"name": "Kestrel-7", "feh": -1.5, "hb_ratio": 0.3}])
    with pytest.raises(ValueError, match="give all three"):
        counts_from_rows([{"name": "Kestrel-7", "feh": -1.5, "n_blue": 3}])


def test_cli_counts_errors_are_one_line(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("name,fe_h,n_blue,n_var,n_red\nKestrel-7,-1.5,10,20,30\n")
    r = _cli("fit", "--counts", str(bad))
    assert r.returncode == 2 and r.stderr.count("\n") == 1 and "did you mean 'feh'" in r.stderr
    good = tmp_path / "good.csv"
    good.write_text("name,feh,n_blue,n_var,n_red\nKestrel-7,-1.5,10,20,30\n")
    r = _cli("fit", "--counts", str(good), "--feh", "-1.5")
    assert r.returncode == 2 and "--feh does not apply to --counts" in r.stderr
    r = _cli("fit", "cat.ecsv", "--bands", "V,I")
    assert r.returncode == 2 and "--feh" in r.stderr and "Traceback" not in r.stderr


def test_cli_counts_table_is_resumable_and_writes_results(tmp_path):
    table = tmp_path / "clusters.csv"
    table.write_text("name,feh,n_blue,n_var,n_red,pab_mean,pab_err\n"
                     "Kestrel-7,-1.6,15,70,12,0.57,0.01\nHalcyon-3,-1.3,2,30,80,,\n")
    out = tmp_path / "out"
    r = _cli("fit", "--counts", str(table), "--out", str(out), "--max-steps", "1500", "--jobs", "2", "--json")
    assert r.returncode == 0, r.stderr
    res = json.loads(r.stdout)
    assert [c["name"] for c in res["clusters"]] == ["Kestrel-7", "Halcyon-3"]
    assert res["population_eta"]["n_clusters"] == 2
    for f in ("counts_results.ecsv", "eta_feh_age.png", "eta_feh_age.pdf", "Kestrel-7/result.json"):
        assert (out / f).is_file(), f
    from astropy.table import Table
    t = Table.read(out / "counts_results.ecsv")
    assert {"eta", "eta_lo", "eta_hi", "eta_sd", "converged", "p_value"} <= set(t.colnames)
    assert np.all(t["eta_lo"] <= t["eta"]) and np.all(t["eta"] <= t["eta_hi"])
    stamp = (out / "Kestrel-7" / "result.json").stat().st_mtime_ns
    r2 = _cli("fit", "--counts", str(table), "--out", str(out), "--max-steps", "1500", "--json")
    assert r2.returncode == 0
    assert (out / "Kestrel-7" / "result.json").stat().st_mtime_ns == stamp  # finished clusters are skipped
    assert json.loads(r2.stdout)["clusters"][0]["eta"] == res["clusters"][0]["eta"]
    # a directory that is not a batch directory is never filled
    other = tmp_path / "other"
    other.mkdir()
    (other / "mine.txt").write_text("keep")
    r3 = _cli("fit", "--counts", str(table), "--out", str(other))
    assert r3.returncode == 2 and (other / "mine.txt").read_text() == "keep"


# --------------------------------------------------------------------------- calibration
@pytest.mark.slow
def test_simulation_based_calibration_of_the_intervals():
    """SBC (Talts et al. 2018, arXiv:1804.06788) on 30 injected clusters: the posterior quantile of the true
    eta is uniform (Kolmogorov-Smirnov p > 0.001) and the 68 % interval holds it in 0.68 +- 3 binomial sigma.
    (scripts/sbc_counts.py runs >= 100 draws.)"""
    from scipy.stats import kstest
    res = sbc_counts(30, seed=5, n_hb=150, max_steps=3000)
    rank = np.array([r["eta_rank"] for r in res])
    cover = np.mean((rank >= 0.16) & (rank <= 0.84))
    assert abs(cover - 0.68) <= 3 * math.sqrt(0.68 * 0.32 / rank.size)
    assert kstest(rank, "uniform").pvalue > 1e-3


@pytest.mark.slow
def test_benchmark_population_eta_agrees_with_mcdonald_zijlstra_2015(tmp_path):
    """The held-out (check) globular clusters of tables/targets/clusters.ecsv through the counts path, eta
    spread fixed at the benchmark's 0.045: the population mean Reimers eta within 2 sigma of McDonald &
    Zijlstra 2015, MNRAS 448, 502 (abstract, read: median 0.477 among 56 GCs, systematic +0.050/-0.062;
    sigma = that systematic and our interval in quadrature), and the scatter among clusters within 2 sigma
    of their standard deviation 0.070 (whose own sampling error over 56 clusters is 0.070 / sqrt(2 x 55))."""
    from hbmodel.inference.counts_fit import benchmark_counts, run_counts_table
    clusters = benchmark_counts(role="check")
    assert len(clusters) >= 10
    summary, hier = run_counts_table(clusters, tmp_path / "bench", eta_sd_fixed=0.045, max_steps=3000,
                                     progress=False)
    assert np.all(np.asarray(summary["status"]).astype(str) == "done")
    mu, tau = hier["mu"], hier["tau"]
    sig_mu = math.hypot(0.5 * (mu["hi"] - mu["lo"]), 0.062 if mu["median"] < 0.477 else 0.050)
    assert abs(mu["median"] - 0.477) < 2 * sig_mu, mu
    sig_tau = math.hypot(0.5 * (tau["hi"] - tau["lo"]), 0.070 / math.sqrt(2 * 55))
    assert abs(tau["median"] - 0.070) < 2 * sig_tau, tau
