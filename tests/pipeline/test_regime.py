"""The regime decision (critical / gapped / undecided) and the withholding of critical headline figures.

Synthetic fit records exercise the decision table of mps.pipeline.regime; the end-to-end cases on
real chains are in tests/pipeline/test_exact_method.py (exact free fermions, Peschel, J. Phys. A 36,
L205 (2003)).
"""

from __future__ import annotations

import math

import pytest

from mps.pipeline.regime import correlation_signal, decide, entropy_signal, headline

L = 64
WINDOW = (8, 56)


def _fit(c, residual=1e-4):
    return {"value": c, "residual_rms": residual, "window": list(WINDOW)}


@pytest.mark.parametrize("c, residual, expected", [
    (1.0, 1e-3, "grows"),        # a c = 1 chain (free fermions), good fit
    (1.0, 0.5, "unclear"),       # growth with a residual comparable to the growth itself
    (0.02, 1e-3, "saturates"),   # area law
    (-0.05, 1e-3, "saturates"),  # the "negative c" of a gapped chain
    (0.18, 1e-3, "unclear"),     # between the thresholds
])
def test_entropy_signal(c, residual, expected):
    assert entropy_signal(_fit(c, residual), L)[0] == expected


@pytest.mark.parametrize("corr, expected", [
    (None, "unmeasured"),
    ({"xi": math.inf}, "none"),
    ({"xi": None, "error": "too few points"}, "none"),
    ({"xi": 3.0}, "exponential"),
    ({"xi": 20.0}, "long"),
])
def test_correlation_signal(corr, expected):
    assert correlation_signal(corr, WINDOW)[0] == expected


@pytest.mark.parametrize("c, corr, verdict", [
    (1.0, {"xi": math.inf}, "critical"),
    (1.0, None, "critical"),
    (-0.05, {"xi": math.inf}, "gapped"),      # saturation without a resolved decay: still no log l
    (0.02, {"xi": 3.0}, "gapped"),
    (0.18, {"xi": 3.0}, "gapped"),
    (1.0, {"xi": 3.0}, "undecided"),         # contradictory signals
    (0.18, {"xi": math.inf}, "undecided"),
])
def test_decision_table(c, corr, verdict):
    reg = decide(_fit(c), corr, WINDOW, L)
    assert reg["verdict"] == verdict
    assert reg["reason"].startswith(verdict) and len(reg["reasons"]) == 2


def test_headline_withholds_outside_critical_and_negative_values():
    crit = decide(_fit(1.0), {"xi": math.inf}, WINDOW, L)
    gapped = decide(_fit(0.01), {"xi": 3.0}, WINDOW, L)
    assert headline({"value": 0.98}, "c", crit) == (0.98, None)
    value, why = headline({"value": -0.07}, "K", crit)
    assert value is None and "<= 0" in why
    value, why = headline({"value": 0.98}, "c", gapped)
    assert value is None and why.startswith("gapped")


def test_gapped_by_saturation_does_not_claim_the_correlations_do_not_decay():
    """A saturated entropy with no correlation length found is called gapped; the reason says
    that no decay was resolved (the chain may be too short), not that there is none, which
    would contradict the verdict. A critical verdict keeps the plain wording."""
    gapped = decide(_fit(-0.05), {"xi": math.inf}, WINDOW, L)
    assert "do not decay" not in gapped["reason"] and "too short to resolve" in gapped["reason"]
    critical = decide(_fit(1.0), {"xi": math.inf}, WINDOW, L)
    assert "too short" not in critical["reason"]
    assert "no exponential decay of the charge correlations found" in critical["reason"]
    unmeasured = decide(_fit(-0.05), None, WINDOW, L)
    assert "too short" not in unmeasured["reason"]
