"""The statistics of a spot check, against published values and an independent computation."""

from __future__ import annotations

import math

import numpy as np
import pytest

from recognizer.review.residual import (
    clopper_pearson_upper,
    fields_needed,
    parse_share,
    percent,
    share_words,
    zero_error_bound,
)


def _binomial_tail(k: int, n: int, p: float) -> float:
    """P(X <= k) for X ~ Binomial(n, p), summed term by term with math.comb."""
    return sum(math.comb(n, i) * p**i * (1.0 - p) ** (n - i) for i in range(k + 1))


def _upper_by_bisection(k: int, n: int, alpha: float = 0.05) -> float:
    """The p with P(X <= k) = alpha (the tail falls as p grows), by bisection: the definition of the
    one-sided Clopper–Pearson upper bound (Clopper & Pearson 1934), computed independently of scipy."""
    low, high = 0.0, 1.0
    for _ in range(100):
        mid = (low + high) / 2
        if _binomial_tail(k, n, mid) > alpha:
            low = mid
        else:
            high = mid
    return (low + high) / 2


@pytest.mark.parametrize("n", [1, 10, 30, 100, 300, 2995])
def test_zero_errors_is_the_closed_form_and_the_rule_of_three(n):
    # With no error in n, the 95 % bound is 1 - 0.05 ** (1 / n) (the binomial tail (1 - p) ** n = 0.05),
    # about 3 / n for large n: the "rule of three" (Hanley & Lippman-Hand 1983, JAMA 249:1743).
    exact = 1.0 - 0.05 ** (1.0 / n)
    assert clopper_pearson_upper(0, n) == pytest.approx(exact, rel=1e-9)
    assert zero_error_bound(n) == pytest.approx(exact, rel=1e-12)
    if n >= 100:
        assert exact == pytest.approx(3.0 / n, rel=0.02)


@pytest.mark.parametrize("k, n", [(1, 10), (2, 20), (1, 50), (5, 100), (3, 1000), (10, 200), (9, 10)])
def test_clopper_pearson_against_the_binomial_tail_solved_by_bisection(k, n):
    # Clopper & Pearson 1934: the upper bound solves sum_{i<=k} C(n,i) p^i (1-p)^(n-i) = 0.05.
    assert clopper_pearson_upper(k, n) == pytest.approx(_upper_by_bisection(k, n), rel=1e-7)


def test_published_values():
    # Clopper & Pearson's chart and later tables: 0 in 10 -> 0.259 (one-sided 95 %);
    # the rule of three's own example, 0 in 300 -> about 1 % (Hanley & Lippman-Hand 1983).
    assert clopper_pearson_upper(0, 10) == pytest.approx(0.2589, abs=1e-4)
    assert clopper_pearson_upper(0, 300) == pytest.approx(0.00994, abs=1e-5)


def test_edges():
    assert clopper_pearson_upper(0, 0) == 1.0
    assert clopper_pearson_upper(5, 5) == 1.0
    with pytest.raises(ValueError):
        clopper_pearson_upper(6, 5)
    with pytest.raises(ValueError):
        fields_needed(0.0)


def test_fields_needed():
    # The smallest n with 1 - 0.05 ** (1 / n) <= 0.001 is 2,995 (ln 0.05 / ln 0.999 = 2994.2).
    assert fields_needed(0.001) == 2995
    assert zero_error_bound(2994) > 0.001 >= zero_error_bound(2995)
    assert fields_needed(0.01) == 299  # about 3 / 0.01: the rule of three
    for k in (1, 2, 3):
        n = fields_needed(0.001, k)
        assert clopper_pearson_upper(k, n) <= 0.001 < clopper_pearson_upper(k, n - 1)
    # Poisson limit (common practice, no source beyond the chi-square quantiles): n ~ chi2_{0.95}(2k+2) / 2 / p
    assert [fields_needed(0.001, k) for k in (1, 2, 3)] == pytest.approx([4744, 6296, 7754], abs=5)


def test_shares_in_words():
    assert parse_share("0.1%") == pytest.approx(0.001)
    assert parse_share("0.001") == pytest.approx(0.001)
    for bad in ("0", "1", "150%", "a lot", "-0.1%"):
        with pytest.raises(ValueError):
            parse_share(bad)
    assert share_words(0.001) == "0.1 %"
    assert percent(0.0913981) == "9.14 %" and percent(0.0913) == "9.13 %" and percent(0.09131) == "9.14 %"
    assert percent(0.000999744) == "0.1000 %" and percent(1.0) == "100 %"  # rounded up: a bound is never understated


def test_coverage_in_seeded_simulations():
    """In 1,000 simulated spot checks of batches with a known error rate, the 95 % bound is at or above
    the true rate at least 95 % of the time (the Clopper–Pearson bound is exact or conservative)."""
    rng = np.random.default_rng(2024)
    runs = 1000
    rates = rng.choice([0.001, 0.005, 0.01, 0.03, 0.1], size=runs)
    audited = rng.choice([50, 200, 500, 1000], size=runs)
    errors = rng.binomial(audited, rates)
    from scipy.stats import beta

    bounds = np.where(errors == audited, 1.0, beta.ppf(0.95, errors + 1, np.maximum(audited - errors, 1)))
    for i in range(0, runs, 97):  # the vectorised form is the function's
        assert bounds[i] == pytest.approx(clopper_pearson_upper(int(errors[i]), int(audited[i])))
    covered = np.mean(bounds >= rates)
    assert covered >= 0.95, covered
