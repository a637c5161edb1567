"""Designs: one conformance class every design kind passes, then each kind's own checks.

Published facts checked here, named beside the tests that use them:
- Latin hypercube: each of n equal-probability strata of every parameter holds exactly one
  point (McKay, Beckman & Conover 1979).
- Sobol sequence: for n = 2^m points every elementary interval of length 1/n in each
  coordinate holds one point, and the first two coordinates form a (0, m, 2)-net (Sobol 1967).
- Saltelli's scheme: N(2D + 2) model runs with second-order indices, N(D + 2) without
  (Saltelli et al. 2010, as implemented and stated by SALib's ``sobol.sample``).
- Morris trajectories: r trajectories of D + 1 points on a p-level grid, each step moving one
  parameter by delta = p / (2 (p - 1)), every parameter once per trajectory (Morris 1991).
"""

from __future__ import annotations


import numpy as np
import pytest
from scipy import stats
from typer.testing import CliRunner

import sweep
from sweep import design as designs
from sweep.cli import app

from support.design_conformance import MODEL, RUN, DesignConformance, expect_bad, load

LOG_K = '{ low = 0.01, high = 10.0, distribution = "log-uniform" }'


class TestGrid(DesignConformance):
    body = """
    [design]
    kind = "grid"
    [design.vary]
    k = { low = 0.1, high = 10.0, count = 3, spacing = "log" }
    g = [0.1, 0.2]
    A0 = { low = 0, high = 10, count = 3, integer = true }
    """
    names = ("k", "g", "A0")
    n_points = 18
    unknown = "[design.vary]\nnope = [1.0]\n"

    def test_ranges_and_order(self, spec):
        points = spec.points()
        np.testing.assert_allclose(np.unique(points[:, 0]), [0.1, 1.0, 10.0])
        assert sorted(set(points[:, 2])) == [0.0, 5.0, 10.0]
        assert list(points[:3, 2]) == [0.0, 5.0, 10.0]  # the last parameter varies fastest

    def test_linear_range(self, spec_file):
        spec = load(spec_file, "[design.vary]\nk = { low = 1, high = 2, count = 5 }\n")
        np.testing.assert_allclose(spec.points()[:, 0], [1.0, 1.25, 1.5, 1.75, 2.0])

    def test_empty_range(self, spec_file):
        expect_bad(spec_file, "[design.vary]\nk = { low = 1, high = 1, count = 3 }\n", "design.vary.k", "empty range")

    def test_empty_list(self, spec_file):
        expect_bad(spec_file, "[design.vary]\nk = []\n", "design.vary.k", "non-empty")

    def test_low_above_high(self, spec_file):
        expect_bad(spec_file, "[design.vary]\nk = { low = 5, high = 1, count = 3 }\n", "design.vary.k", "below high")

    def test_log_range_touching_zero(self, spec_file):
        expect_bad(spec_file, '[design.vary]\nk = { low = 0, high = 1, count = 3, spacing = "log" }\n',
                   "design.vary.k.low", "cannot touch zero")

    def test_integer_levels_that_repeat(self, spec_file):
        expect_bad(spec_file, "[design.vary]\nA0 = { low = 0, high = 2, count = 5, integer = true }\n",
                   "design.vary.A0.count", "repeat")


class TestLatinHypercube(DesignConformance):
    body = f"""
    [design]
    kind = "lhs"
    points = 50
    [design.vary]
    k = {LOG_K}
    g = {{ low = 0.1, high = 1.0 }}
    A0 = {{ low = 0, high = 4, integer = true }}
    Kd = {{ distribution = "normal", mean = 1.0, sd = 0.5, low = 0.2 }}
    """
    names = ("k", "g", "A0", "Kd")
    n_points = 50
    unknown = '[design]\nkind = "lhs"\npoints = 4\n[design.vary]\nnope = { low = 0, high = 1 }\n'

    @pytest.mark.parametrize("optimization", [None, "random-cd"])
    def test_every_stratum_holds_one_point(self, spec_file, optimization):
        # McKay, Beckman & Conover (1979): n strata of equal probability per parameter, one point each
        option = f'optimization = "{optimization}"\n' if optimization else ""
        spec = load(spec_file, self.body.replace('points = 50\n', f"points = 50\n{option}"))
        points, n = spec.points(), 50
        unit = {"k": (np.log(points[:, 0]) - np.log(0.01)) / (np.log(10.0) - np.log(0.01)),
                "g": (points[:, 1] - 0.1) / 0.9,
                "Kd": stats.truncnorm.cdf(points[:, 3], (0.2 - 1.0) / 0.5, np.inf, loc=1.0, scale=0.5)}
        for name, u in unit.items():
            strata = np.floor(u * n).astype(int)
            assert sorted(strata) == list(range(n)), name

    def test_log_uniform_margin_is_uniform_in_log_space(self, spec_file):
        # a Kolmogorov-Smirnov test of log k against the uniform distribution, at the 1 % level
        spec = load(spec_file, self.body.replace("points = 50", "points = 200"))
        u = (np.log(spec.points()[:, 0]) - np.log(0.01)) / (np.log(10.0) - np.log(0.01))
        assert stats.kstest(u, "uniform").pvalue > 0.01
        assert stats.kstest(spec.points()[:, 0] / 10.0, "uniform").pvalue < 1e-6  # not uniform on a linear scale

    def test_integer_parameter_stays_in_range(self, spec):
        counts = spec.points()[:, 2]
        assert np.all(counts == np.round(counts)) and counts.min() >= 0 and counts.max() <= 4
        # widened by half a unit each side, 0..4 are five equal fifths of the strata: 10 points each
        assert np.bincount(counts.astype(int)).tolist() == [10] * 5

    def test_truncated_normal_respects_its_bound(self, spec):
        assert spec.points()[:, 3].min() >= 0.2

    def test_different_seed_different_points(self, spec):
        assert not np.array_equal(designs.expand(spec.design, 7), designs.expand(spec.design, 8))

    def test_seed_stream_is_not_a_replicate_stream(self, spec):
        # the design draws from SeedSequence(seed, spawn_key=(tag,)), never from (point, replicate)
        tag = designs.DESIGN_SPAWN_KEY
        assert len(tag) == 1
        assert designs.rng(7).random() != np.random.default_rng(np.random.SeedSequence(7, spawn_key=(tag[0], 0))).random()

    def test_conditions_cross_the_same_sample(self, spec_file):
        spec = load(spec_file, f"""
        [design]
        kind = "lhs"
        points = 8
        [design.vary]
        k = {LOG_K}
        [design.conditions]
        Kd = [1, 10, 100]
        g = {{ low = 0.1, high = 0.2, count = 2 }}
        """)
        points = spec.points()
        assert spec.param_names == ("Kd", "g", "k") and points.shape == (48, 3)
        blocks = points.reshape(6, 8, 3)
        assert [tuple(b[0, :2]) for b in blocks] == [(1, 0.1), (1, 0.2), (10, 0.1), (10, 0.2), (100, 0.1), (100, 0.2)]
        assert all(np.array_equal(b[:, 2], blocks[0][:, 2]) for b in blocks)  # same sample at each condition

    def test_at_most_two_conditions(self, spec_file):
        expect_bad(spec_file, f"""
        [design]
        kind = "lhs"
        points = 4
        [design.vary]
        k = {LOG_K}
        [design.conditions]
        Kd = [1, 2]
        g = [1, 2]
        A0 = [1, 2]
        """, "design.conditions", "at most 2")

    def test_condition_also_sampled(self, spec_file):
        expect_bad(spec_file, f'[design]\nkind = "lhs"\npoints = 4\n[design.vary]\nk = {LOG_K}\n'
                   "[design.conditions]\nk = [1, 2]\n", "design.conditions.k", "also sampled")

    @pytest.mark.parametrize("entry, field, fragment", [
        ("{ low = 1, high = 1 }", "design.vary.k", "empty range"),
        ("{ low = 2, high = 1 }", "design.vary.k", "below high"),
        ('{ low = 0, high = 1, distribution = "log-uniform" }', "design.vary.k.low", "cannot touch zero"),
        ('{ low = -1, high = 1, distribution = "log-uniform" }', "design.vary.k.low", "cannot touch zero"),
        ('{ low = 1, high = 2, distribution = "gamma" }', "design.vary.k.distribution", "unknown distribution"),
        ('{ low = 1 }', "design.vary.k.high", "missing"),
        ('{ distribution = "normal", mean = 1 }', "design.vary.k.sd", "missing"),
        ('{ distribution = "normal", mean = 1, sd = -1 }', "design.vary.k.sd", "> 0"),
        ('{ distribution = "lognormal", median = 0, sigma = 1 }', "design.vary.k.median", "> 0"),
        ('{ low = 1, high = 2, sd = 1 }', "design.vary.k.sd", "not used"),
        ('{ low = 1, high = 2, size = 1 }', "design.vary.k.size", "unknown key"),
        ("[1, 2]", "design.vary.k", "distribution"),
        ('{ distribution = "normal", mean = 1, sd = 1 }', "design.vary.k", "unbounded below"),
    ])
    def test_bad_distribution(self, spec_file, entry, field, fragment):
        expect_bad(spec_file, f'[design]\nkind = "lhs"\npoints = 4\n[design.vary]\nk = {entry}\n', field, fragment)

    def test_bad_options(self, spec_file):
        body = f'[design]\nkind = "lhs"\npoints = 4\n[design.vary]\nk = {LOG_K}\n'
        expect_bad(spec_file, body.replace("points = 4", "points = 0"), "design.points", ">= 1")
        expect_bad(spec_file, body.replace("points = 4", 'points = 4\noptimization = "lloyd"'),
                   "design.optimization", "unknown")
        expect_bad(spec_file, body.replace("points = 4", "points = 4\nsize = 3"), "design.size", "unknown key")
        expect_bad(spec_file, body.replace("points = 4", 'points = 5000\noptimization = "random-cd"'),
                   "design.optimization", "too slow")
        expect_bad(spec_file, '[design]\nkind = "lhs"\npoints = 4\n', "design.vary", "missing")

    def test_continuous_initial_count_is_refused(self, spec_file):
        message = expect_bad(spec_file, '[design]\nkind = "lhs"\npoints = 4\n[design.vary]\nA0 = { low = 0, high = 9 }\n',
                             "design.vary.A0", "whole number")
        assert "integer = true" in message


class TestSobol(DesignConformance):
    body = f"""
    [design]
    kind = "sobol"
    points = 64
    [design.vary]
    k = {LOG_K}
    g = {{ low = 0.0, high = 1.0 }}
    Kd = {{ distribution = "lognormal", median = 1.0, sigma = 0.5 }}
    """
    names = ("k", "g", "Kd")
    n_points = 64
    unknown = '[design]\nkind = "sobol"\npoints = 4\n[design.vary]\nnope = { low = 0, high = 1 }\n'

    def test_one_and_two_dimensional_balance(self, spec):
        # Sobol (1967): 2^m points fill every elementary interval of length 2^-m once per coordinate,
        # and every 2^-a x 2^-b box with a + b = m once in the first two coordinates (a (0, m, 2)-net);
        # Owen's scrambling keeps both properties
        points, n, m = spec.points(), 64, 6
        u = np.column_stack([(np.log(points[:, 0]) - np.log(0.01)) / (np.log(10.0) - np.log(0.01)), points[:, 1]])
        for j in range(2):
            assert sorted(np.floor(u[:, j] * n).astype(int)) == list(range(n))
        for a in range(m + 1):
            boxes = np.floor(u[:, 0] * 2**a).astype(int) * 2 ** (m - a) + np.floor(u[:, 1] * 2 ** (m - a)).astype(int)
            assert sorted(boxes) == list(range(n)), a

    def test_lognormal_margin(self, spec):
        kd = spec.points()[:, 2]
        assert kd.min() > 0
        assert stats.kstest(np.log(kd), "norm", args=(0.0, 0.5)).pvalue > 0.01

    def test_points_must_be_a_power_of_two(self, spec_file):
        expect_bad(spec_file, f'[design]\nkind = "sobol"\npoints = 100\n[design.vary]\nk = {LOG_K}\n',
                   "design.points", "power of two", "64 or 128")

    def test_different_seed_different_scrambling(self, spec):
        assert not np.array_equal(designs.expand(spec.design, 7), designs.expand(spec.design, 8))


class TestSaltelli(DesignConformance):
    body = f"""
    [design]
    kind = "saltelli"
    base_samples = 16
    [design.vary]
    k = {LOG_K}
    g = {{ low = 0.1, high = 1.0 }}
    Kd = {{ low = 1.0, high = 2.0 }}
    """
    names = ("k", "g", "Kd")
    n_points = 16 * (2 * 3 + 2)
    unknown = '[design]\nkind = "saltelli"\nbase_samples = 4\n[design.vary]\nnope = { low = 0, high = 1 }\n'

    @pytest.mark.parametrize("second_order, d", [(True, 1), (True, 3), (False, 3), (False, 2)])
    def test_sample_count_matches_the_published_scheme(self, spec_file, second_order, d):
        # Saltelli et al. (2010): N(2D + 2) runs with second-order indices, N(D + 2) without;
        # SALib's sobol.sample documents the same counts
        vary = "\n".join(f"{name} = {{ low = 0.1, high = 1.0 }}" for name in ("k", "g", "Kd")[:d])
        spec = load(spec_file, f'[design]\nkind = "saltelli"\nbase_samples = 8\n'
                               f'second_order = {str(second_order).lower()}\n[design.vary]\n{vary}\n')
        expected = 8 * (2 * d + 2) if second_order else 8 * (d + 2)
        assert spec.points().shape == (expected, d)

    def test_rows_pair_as_the_analysis_expects(self, spec):
        # per base sample: A, AB_i (A with column i from B), BA_i (B with column i from A), B
        d = 3
        for block in spec.points().reshape(16, 2 * d + 2, d):
            a, b = block[0], block[-1]
            for i in range(d):
                ab, ba = block[1 + i], block[1 + d + i]
                assert ab[i] == b[i] and np.array_equal(np.delete(ab, i), np.delete(a, i))
                assert ba[i] == a[i] and np.array_equal(np.delete(ba, i), np.delete(b, i))

    def test_describe_keeps_what_pairing_needs(self, spec):
        facts = designs.describe(spec.design)
        assert facts["N"] == 16 and facts["D"] == 3 and facts["calc_second_order"] is True
        assert facts["bounds"] == [[0.01, 10.0], [0.1, 1.0], [1.0, 2.0]]
        assert facts["dists"] == ["log-uniform", "uniform", "uniform"]
        assert facts["sampled"] == ["k", "g", "Kd"] and facts["points_per_condition"] == 128

    def test_base_samples_must_be_a_power_of_two(self, spec_file):
        expect_bad(spec_file, f'[design]\nkind = "saltelli"\nbase_samples = 12\n[design.vary]\nk = {LOG_K}\n',
                   "design.base_samples", "power of two")

    def test_second_order_must_be_a_boolean(self, spec_file):
        expect_bad(spec_file, f'[design]\nkind = "saltelli"\nbase_samples = 4\nsecond_order = "yes"\n'
                   f"[design.vary]\nk = {LOG_K}\n", "design.second_order", "true or false")


class TestTable(DesignConformance):
    body = """
    [design]
    kind = "table"
    file = "points.csv"
    """
    names = ("k", "g")
    n_points = 3
    unknown = '[design]\nkind = "table"\nfile = "points.csv"\n[design.vary]\nnope = {}\n'

    def write_files(self, folder) -> None:
        (folder / "points.csv").write_text("# k per hour, g per hour\nk,g\n1.0,0.5\n\n2.5,0.25\n4,1e-1\n")

    def test_rows_in_file_order(self, spec):
        assert spec.points().tolist() == [[1.0, 0.5], [2.5, 0.25], [4.0, 0.1]]

    def test_renamed_and_selected_columns(self, spec_file, tmp_path):
        (tmp_path / "other.csv").write_text("koff,k\n0.1,3\n0.2,4\n")
        spec = load(spec_file, '[design]\nkind = "table"\nfile = "other.csv"\n[design.vary]\n'
                               'k = {}\ng = { column = "koff" }\n')
        assert spec.param_names == ("k", "g") and spec.points().tolist() == [[3.0, 0.1], [4.0, 0.2]]

    def test_changing_the_file_changes_the_spec_hash(self, spec_file, tmp_path):
        self.write_files(tmp_path)
        before = load(spec_file, self.body).sha256
        (tmp_path / "points.csv").write_text("k,g\n1.0,0.5\n")
        assert load(spec_file, self.body).sha256 != before

    def test_missing_column(self, spec_file, tmp_path):
        self.write_files(tmp_path)
        expect_bad(spec_file, '[design]\nkind = "table"\nfile = "points.csv"\n[design.vary]\nk = {}\nKd = {}\n',
                   "design.vary.Kd", "column 'Kd' missing from points.csv")

    def test_row_missing_a_value(self, spec_file, tmp_path):
        (tmp_path / "points.csv").write_text("k,g\n1.0,0.5\n2.0\n")
        expect_bad(spec_file, self.body, "design.file", "line 3 has 1 values")

    def test_value_not_a_number(self, spec_file, tmp_path):
        (tmp_path / "points.csv").write_text("k,g\n1.0,fast\n")
        expect_bad(spec_file, self.body, "design.file", "'fast' is not a finite number")

    def test_missing_file(self, spec_file):
        expect_bad(spec_file, self.body, "design.file", "cannot read")

    def test_unknown_column_without_vary(self, spec_file, tmp_path):
        (tmp_path / "points.csv").write_text("k,typo\n1.0,0.5\n")
        expect_bad(spec_file, self.body, "design.file column 'typo'", "not a parameter")

    def test_negative_rate_in_the_table(self, spec_file, tmp_path):
        (tmp_path / "points.csv").write_text("k,g\n1.0,-0.5\n")
        expect_bad(spec_file, self.body, "design.vary.g", ">= 0")


class TestMorris(DesignConformance):
    body = f"""
    [design]
    kind = "morris"
    trajectories = 6
    levels = 4
    [design.vary]
    k = {LOG_K}
    g = {{ low = 0.1, high = 1.0 }}
    Kd = {{ low = 1.0, high = 2.0 }}
    """
    names = ("k", "g", "Kd")
    n_points = 6 * (3 + 1)
    unknown = '[design]\nkind = "morris"\ntrajectories = 2\n[design.vary]\nnope = { low = 0, high = 1 }\n'

    @staticmethod
    def unit(points: np.ndarray) -> np.ndarray:
        """The points back in the unit cube, computed here independently of sweep.analysis."""
        return np.column_stack([(np.log(points[:, 0]) - np.log(0.01)) / (np.log(10.0) - np.log(0.01)),
                                (points[:, 1] - 0.1) / 0.9, points[:, 2] - 1.0])

    def test_one_parameter_moves_per_step_by_delta(self, spec):
        # Morris (1991): within a trajectory each step moves exactly one parameter, by
        # delta = p / (2 (p - 1)) = 2/3 for p = 4, and every parameter moves exactly once
        for trajectory in self.unit(spec.points()).reshape(6, 4, 3):
            steps = np.diff(trajectory, axis=0)
            moved = np.abs(steps) > 1e-9
            assert moved.sum(axis=1).tolist() == [1, 1, 1]
            assert sorted(np.flatnonzero(moved) % 3) == [0, 1, 2]
            np.testing.assert_allclose(np.abs(steps[moved]), 2 / 3, atol=1e-12)

    def test_points_lie_on_the_level_grid(self, spec):
        # p = 4 levels: 0, 1/3, 2/3, 1 in the unit cube (Morris 1991)
        unit = self.unit(spec.points())
        np.testing.assert_allclose(unit * 3, np.round(unit * 3), atol=1e-9)
        assert unit.min() >= -1e-12 and unit.max() <= 1 + 1e-12

    def test_describe_keeps_what_the_analysis_needs(self, spec):
        facts = designs.describe(spec.design)
        assert facts["num_levels"] == 4 and facts["trajectories"] == 6 and facts["points_per_condition"] == 24
        assert facts["parameters"]["k"]["distribution"] == "log-uniform"
        assert (facts["parameters"]["g"]["low"], facts["parameters"]["g"]["high"]) == (0.1, 1.0)
        assert facts["dists"] == ["log-uniform", "uniform", "uniform"]

    def test_different_seed_different_trajectories(self, spec):
        assert not np.array_equal(designs.expand(spec.design, 7), designs.expand(spec.design, 8))

    def test_conditions_repeat_the_trajectories(self, spec_file):
        spec = load(spec_file, self.body + "[design.conditions]\nA0 = [0, 10]\n")
        points = spec.points()
        assert spec.param_names == ("A0", "k", "g", "Kd") and points.shape == (48, 4)
        np.testing.assert_array_equal(points[:24, 1:], points[24:, 1:])

    @pytest.mark.parametrize("table, field, fragment", [
        ('trajectories = 1\n[design.vary]\nk = { low = 1, high = 2 }', "design.trajectories", "at least 2"),
        ('trajectories = 4\nlevels = 5\n[design.vary]\nk = { low = 1, high = 2 }', "design.levels", "even"),
        ('trajectories = 4\n[design.vary]\nk = { distribution = "normal", mean = 1, sd = 0.1, low = 0 }',
         "design.vary.k.distribution", "grid between low and high"),
        ('trajectories = 4\n[design.vary]\nA0 = { low = 0, high = 10, integer = true }', "design.vary.A0.integer",
         "exact grid step"),
        ('points = 4\n[design.vary]\nk = { low = 1, high = 2 }', "design.points", "unknown"),
    ])
    def test_bad_designs_are_refused(self, spec_file, table, field, fragment):
        expect_bad(spec_file, f'[design]\nkind = "morris"\n{table}\n', field, fragment)


def test_unknown_kind(spec_file):
    expect_bad(spec_file, '[design]\nkind = "random"\n', "design.kind", "unknown design", "lhs")


def test_every_registered_kind_has_a_conformance_class():
    tested = {cls.__name__ for cls in DesignConformance.__subclasses__()}
    kinds = {"grid": "TestGrid", "lhs": "TestLatinHypercube", "sobol": "TestSobol", "saltelli": "TestSaltelli",
             "table": "TestTable", "morris": "TestMorris"}
    assert set(designs.DESIGNS) == set(kinds) and set(kinds.values()) <= tested


def test_sampled_design_runs_end_to_end(spec_file, tmp_path):
    """An LHS over an initial count and a rate, with a derived rate, through `sweep run`."""
    path = spec_file(RUN + f"""
    [design]
    kind = "lhs"
    points = 3
    [design.vary]
    k = {LOG_K}
    A0 = {{ low = 0, high = 20, integer = true }}
    [derived]
    g = "k / 10"
    """, model=MODEL)
    store = tmp_path / "out.zarr"
    result = CliRunner().invoke(app, ["run", str(path), "--workers", "1", "--store", str(store)])
    assert result.exit_code == 0, result.output
    ds = sweep.open_results(store)
    spec = sweep.load(path)
    np.testing.assert_array_equal(ds["params"].values, spec.points())
    first = ds["counts"].isel(time=0, species=0).values  # the initial count is each point's A0
    assert np.array_equal(first, np.repeat(spec.points()[:, 1:2], 2, axis=1))
