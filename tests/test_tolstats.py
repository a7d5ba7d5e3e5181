"""A large tolerance study merges its statistics from per-chunk summaries (issue 19): percentiles
within their stated bracket of numpy.percentile on the gathered samples, histogram counts equal to
numpy.histogram with the same edges, samples.csv streamed chunk by chunk, and the same numbers
whatever the worker count or executor.

The references are numpy's own ``percentile`` (method "linear", its default) and ``histogram``
run here on the samples a gathered study keeps (numpy documentation).
"""

from __future__ import annotations

import io

import numpy as np
import pytest
from coil_cases import InProcess, two_band_study

from kickback import load_case
from kickback.studies import tolstats
from kickback.studies.tolerance import DRAW_BLOCK, PERCENTILES, draw, run_tolerance
from kickback.studies.tolsample import draw_rows

TOL = two_band_study("merged statistics test")
N, CHUNK, SEED = 2300, 500, 9
KW = dict(engine="batch", chunk=CHUNK, search_budget=4, recheck=3)



class Rows:
    """A sink that writes samples.csv to a string, and records the order of the chunks."""

    def __init__(self, tr_names, flist):
        from kickback.outputs.tolerances import SamplesCsv

        self.buf = io.StringIO()
        self.csv = SamplesCsv(self.buf, tr_names, flist)
        self.starts = []

    def __call__(self, start, rows, figures, passed, errors):
        self.starts.append(start)
        self.csv(start, rows, figures, passed, errors)


@pytest.fixture(scope="module")
def runs():
    from kickback.studies.tolerance import figure_list

    case = load_case(TOL)
    names, flist = tuple(t.path for t in case.tolerances), figure_list(case)
    out = {"gathered": run_tolerance(case, N, SEED, workers=1, **KW)}
    for key, kw in (("merged-1", dict(workers=1)), ("merged-2", dict(workers=2)),
                    ("merged-executor", dict(executor=InProcess()))):
        sink = Rows(names, flist)
        out[key] = run_tolerance(case, N, SEED, gather=0, sink=sink, **kw, **KW)
        out[key + ":csv"] = sink
    return out


def test_a_small_study_is_gathered_and_a_large_one_merged(runs):
    g, m = runs["gathered"], runs["merged-1"]
    assert g.exact and g.samples.shape == (N, 4) and g.to_dict()["percentile_brackets"] is None
    assert not m.exact and m.samples is None and m.figures is None and m.passed is None
    assert m.to_dict()["percentiles_from"].startswith("merged")
    assert g.n == m.n == N
    from kickback.outputs.tolerances import tolerance_figure, tolerance_table

    assert "merged from per-chunk histograms" in tolerance_table(m)
    assert "per-chunk" not in tolerance_table(g)
    assert tolerance_table(m).split("percentiles")[0] == tolerance_table(g).split("percentiles")[0]
    fig = tolerance_figure(m)  # drawn from the merged counts alone
    assert [ax.get_title(loc="left") for ax in fig.axes if ax.get_visible()] == \
        [ax.get_title(loc="left") for ax in tolerance_figure(g).axes if ax.get_visible()]


def test_merged_percentiles_lie_within_their_bracket_of_numpy(runs):
    g, m = runs["gathered"], runs["merged-1"]
    checked = 0
    for f, _, _ in g.figure_list:
        a = g.figures[f]
        if not np.isfinite(a).any():
            assert all(v is None for v in m.percentiles[f].values())
            continue
        for p in PERCENTILES:
            ref = float(np.percentile(a[np.isfinite(a)], p))  # numpy, method "linear"
            lo, hi = m.brackets[f][p]
            assert lo <= ref <= hi, (f, p, lo, ref, hi)
            # the stated width: one bin, 2^-12 of the value, and a few units in the last place
            assert hi - lo <= tolstats.BIN_REL_WIDTH * abs(ref) + 16 * np.spacing(abs(ref)), (f, p)
            assert abs(m.percentiles[f][p] - ref) <= 0.5 * (hi - lo) + 8 * np.spacing(abs(ref))
            checked += 1
        # min and max are exact
        assert m.percentiles[f][0.0] == np.nanmin(a) and m.percentiles[f][100.0] == np.nanmax(a)
    assert checked >= 3 * len(PERCENTILES)  # several figures vary over the samples


def test_histogram_counts_are_numpy_histogram_with_the_same_edges(runs):
    from kickback.outputs.tolerances import histogram

    g, m = runs["gathered"], runs["merged-1"]
    for f, _, _ in g.figure_list:
        a = g.figures[f][np.isfinite(g.figures[f])]
        if not a.size:
            continue
        edges, counts = histogram(m, f)
        ref, _ = np.histogram(a, edges)
        assert np.array_equal(counts, ref), f
        assert counts.sum() == a.size and edges[0] <= a.min() and a.max() < edges[-1]
        assert len(counts) <= 61
        # the gathered study's histogram is the same
        e2, c2 = histogram(g, f)
        assert np.array_equal(e2, edges) and np.array_equal(c2, counts)


def test_merged_numbers_are_identical_across_workers_and_executors(runs):
    first = runs["merged-1"].to_dict()
    for key in ("merged-2", "merged-executor"):
        assert runs[key].to_dict() == first, key
        for f, s in runs["merged-1"].summaries.items():
            t = runs[key].summaries[f]
            assert np.array_equal(s.keys, t.keys) and np.array_equal(s.counts, t.counts), (key, f)
    # everything but the percentiles is the gathered study's, number for number
    g = runs["gathered"].to_dict()
    for k in ("yield", "yield_ci95", "worst_per_check", "corners", "worst_case_search", "sensitivity",
              "detailed_recheck", "failed_samples", "engines"):
        assert g[k] == first[k], k
    assert runs["gathered"].yield_ == runs["gathered"].passed.mean()


def test_samples_csv_is_streamed_in_sample_order(runs):
    from kickback.outputs.tolerances import samples_csv

    whole = samples_csv(runs["gathered"])
    assert whole.count("\n") == N + 1
    for key in ("merged-1", "merged-2", "merged-executor"):
        sink = runs[key + ":csv"]
        assert sink.starts == list(range(0, N, CHUNK)), key
        assert sink.buf.getvalue() == whole, key


def test_a_chunk_draws_its_own_rows_as_the_whole_draw_has_them():
    # numpy's SeedSequence.spawn: block j is child j's, so rows a:b drawn alone equal rows a:b of the
    # whole draw, across a block boundary too
    case = load_case(TOL)
    n = DRAW_BLOCK + 700
    whole = draw(case, n, 4)
    for a, b in ((0, 10), (DRAW_BLOCK - 5, DRAW_BLOCK + 5), (DRAW_BLOCK + 100, n), (3, 3)):
        assert np.array_equal(draw_rows(case, n, 4, a, b), whole[a:b]), (a, b)


# ------------------------------------------------------------------ the summaries on their own
DATA = {
    "normal": np.random.default_rng(1).normal(30.0, 3.0, 20001),
    "lognormal (small values)": np.random.default_rng(2).lognormal(-9.0, 0.3, 5000),
    "both signs": np.random.default_rng(3).normal(0.0, 1.0, 4999),
    "zeros and a few": np.r_[np.zeros(100), np.random.default_rng(4).exponential(1e-3, 7)],
    "integers on bin edges": np.arange(-50.0, 51.0),
    "constant": np.full(7, 2.5),
    "with NaN": np.r_[np.random.default_rng(5).uniform(1, 2, 300), np.full(20, np.nan)],
}


@pytest.mark.parametrize("name", list(DATA))
def test_summary_against_numpy(name):
    data = DATA[name]
    finite = data[np.isfinite(data)]
    merged = tolstats.empty()
    for part in np.array_split(data, 7):
        merged = tolstats.merge(merged, tolstats.summarize(part))
    assert merged.n == finite.size and merged.n_other == data.size - finite.size
    # in another order and split, the same summary
    other = tolstats.empty()
    for part in reversed(np.array_split(data, 3)):
        other = tolstats.merge(tolstats.summarize(part), other)
    assert np.array_equal(other.keys, merged.keys) and np.array_equal(other.counts, merged.counts)
    for p in (0, 0.1, 1, 37.3, 50, 99, 99.9, 100):
        mid, lo, hi = tolstats.percentile(merged, p)
        ref = np.percentile(finite, p)  # numpy, method "linear"
        assert lo <= ref <= hi, (p, lo, ref, hi)
        assert hi - lo <= tolstats.BIN_REL_WIDTH * max(abs(lo), abs(hi)) + 16 * np.spacing(abs(ref)) \
            + tolstats.BIN_ABS_WIDTH
        assert merged.low <= lo and hi <= merged.high
    edges, counts = tolstats.plot_bins(merged)
    ref, _ = np.histogram(finite, edges)
    assert np.array_equal(counts, ref) and counts.sum() == finite.size


def test_bins_are_ordered_like_the_values():
    # IEEE 754 binary64: the bit pattern of a non-negative double grows with its value
    x = np.sort(np.r_[-np.logspace(-300, 300, 999), 0.0, -0.0, np.logspace(-300, 300, 999), 5e-324, -5e-324])
    k = tolstats.bin_keys(x)
    assert np.all(np.diff(k) >= 0)
    lo, hi = tolstats.bin_edges(k)
    assert np.all(lo <= x) and np.all(x < hi)
    normal = np.abs(x) > 1e-300
    assert np.all((hi - lo)[normal] <= tolstats.BIN_REL_WIDTH * np.minimum(abs(lo), abs(hi))[normal] * (1 + 1e-12))


def test_the_command_streams_samples_csv_into_its_out_set(tmp_path):
    from click.testing import CliRunner

    from kickback.cli import main
    from kickback.outputs.tolerances import samples_csv

    p = tmp_path / "c.toml"
    p.write_text(TOL, encoding="utf-8")
    out = tmp_path / "o"
    res = CliRunner().invoke(main, ["tolerance", str(p), "--samples", "300", "--seed", "3", "--recheck", "0",
                                    "--workers", "2", "--out", str(out), "--no-plot"])
    assert res.exit_code in (0, 1), res.output
    tr = run_tolerance(load_case(p), 300, 3, workers=1, recheck=0)
    assert (out / "samples.csv").read_text(encoding="utf-8") == samples_csv(tr)
    assert sorted(q.name for q in out.iterdir()) == ["samples.csv", "tolerance.json"]
    # a study that cannot run leaves no file behind, not even the one being streamed
    bad = tmp_path / "thermal.toml"
    bad.write_text(TOL.replace('type = "ideal"\n', 'type = "ideal"\nthermal_resistance = ["1 K/W"]\n'
                               'thermal_tau = ["1 ms"]\n', 1), encoding="utf-8")
    res = CliRunner().invoke(main, ["tolerance", str(bad), "--samples", "4", "--engine", "batch",
                                    "--out", str(tmp_path / "o2")])
    assert res.exit_code == 2 and "Traceback" not in res.output
    assert sorted(q.name for q in tmp_path.iterdir()) == ["c.toml", "o", "thermal.toml"]
