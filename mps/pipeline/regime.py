"""Which regime the data of a run support: critical, gapped or undecided, with the reasons.

The critical forms (S_n growing as (c/12)(1 + 1/n) log l_eff, the block charge variance as
K s log l_eff; Calabrese and Cardy, J. Stat. Mech. P06002 (2004)) and the massive ones (an area law:
log l replaced by log xi; Murciano, Di Giulio and Calabrese, JHEP 08 (2020) 073) exclude each
other, so a fit of one on data of the other is meaningless: a central charge fitted to a saturated
entropy comes out near zero or negative. Two independent signals decide:

- the entropy: the fitted coefficient of (1/6) log l_eff in S_1 over the fit window (``c`` of the
  critical fit). ``grows`` when c >= ``c_grows`` and the fit residual is small against the growth it
  explains (residual_rms <= ``quality`` x (c/6) x the range of log l_eff); ``saturates`` when
  c < ``c_flat``; ``unclear`` otherwise (badly fitting growth, or in between);
- the correlations: the connected charge-charge correlations (:func:`mps.analysis.correlations.
  correlation_length`): ``exponential`` when they decay exponentially with xi below the smallest
  fitted block, ``long`` when exponential with a longer xi, ``none`` when they do not decay
  exponentially, ``unmeasured`` when correlations were not measured.

Verdict: ``gapped`` when the correlations decay exponentially and the entropy does not grow, or when
the entropy saturates and no exponential decay contradicts it (a short chain may not resolve the
decay); ``critical`` when the entropy grows and the correlations do not decay exponentially within
the window; ``undecided`` otherwise (for instance exponential decay with a growing entropy, or an
unclear entropy). The thresholds c_grows = 0.25 (half the smallest central charge of interest, the
Ising chain's 1/2), c_flat = 0.1 and quality = 0.1 are common practice, not derived bounds.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from mps.theory.fieldtheory import chord_length


@dataclass(frozen=True)
class RegimeRule:
    """Thresholds of the decision (see the module docstring)."""

    c_grows: float = 0.25
    c_flat: float = 0.1
    quality: float = 0.1


def entropy_signal(fit: dict, L: int, rule: RegimeRule = RegimeRule()) -> tuple[str, str]:
    """(signal, reason) of the S_1 fit ``fit`` (a :class:`mps.theory.fieldtheory.LogFit` dict)."""
    c = fit.get("value")
    if c is None or not math.isfinite(c):
        return "unclear", f"no entropy fit ({fit.get('error', 'too few cuts')})"
    lo, hi = fit["window"]
    cuts = np.arange(lo, hi + 1)
    span = float(np.ptp(np.log(chord_length(cuts, L)))) if cuts.size > 1 else 0.0
    growth = c / 6.0 * span
    if c < rule.c_flat:
        return "saturates", (f"the entropy saturates (S_1 grows as {c:.3g}/6 log l_eff over cuts {lo}..{hi}, "
                             f"an area law)")
    if c >= rule.c_grows and fit["residual_rms"] <= rule.quality * growth:
        return "grows", f"the entropy grows as c/6 log l_eff with c = {c:.3g} over cuts {lo}..{hi}"
    return "unclear", (f"the entropy fits c/6 log l_eff poorly (c = {c:.3g}, residual {fit['residual_rms']:.2g} "
                       f"against a growth of {growth:.2g} over cuts {lo}..{hi})")


def correlation_signal(correlation: dict | None, window) -> tuple[str, str]:
    """(signal, reason) of the correlation-length result ``correlation`` (None: not measured)."""
    if correlation is None:
        return "unmeasured", "charge correlations not measured (analysis.correlations: false)"
    xi = correlation.get("xi")
    if xi is None or not math.isfinite(xi):
        why = correlation.get("error")
        return "none", ("no exponential decay of the charge correlations found (no finite correlation length)"
                        if why is None else f"no correlation length ({why})")
    if xi < window[0]:
        return "exponential", (f"charge correlations decay exponentially with xi = {xi:.3g} sites, below the "
                               f"smallest fitted block {window[0]}")
    return "long", f"charge correlations decay exponentially with xi = {xi:.3g} sites, beyond the window start"


def decide(entropy_fit: dict, correlation: dict | None, window, L: int,
           rule: RegimeRule = RegimeRule()) -> dict:
    """The ``regime`` entry of comparison.json: verdict, xi, the two signals and their reasons."""
    ent, ent_why = entropy_signal(entropy_fit, L, rule)
    cor, cor_why = correlation_signal(correlation, window)
    if (cor == "exponential" and ent != "grows") or (ent == "saturates" and cor != "exponential"):
        verdict = "gapped"
    elif ent == "grows" and cor in ("none", "long", "unmeasured"):
        verdict = "critical"
    else:
        verdict = "undecided"
    if verdict == "gapped" and cor == "none":
        cor_why += " - the chain may be too short to resolve the decay"
    reasons = [cor_why, ent_why]
    if verdict == "gapped":
        reason = "gapped: " + "; ".join(reasons) + "; no log l fit of c or K"
    elif verdict == "critical":
        reason = "critical: " + "; ".join(reasons)
    else:
        reason = "undecided: " + "; ".join(reasons) + "; neither the critical nor the massive figures are reported"
    xi = None if correlation is None else correlation.get("xi")
    return {"verdict": verdict, "xi": xi, "reason": reason, "reasons": reasons,
            "signals": {"entropy": ent, "correlations": cor}}


def headline(fit: dict, name: str, regime: dict, positive: bool = True) -> tuple[float | None, str | None]:
    """The value of a critical fit to print, or None and why: only in the critical regime, and
    never a negative value of a quantity that must be positive (c, K)."""
    value = fit.get("value")
    if regime["verdict"] != "critical":
        return None, regime["reason"]
    if value is None or not math.isfinite(value):
        return None, f"{name} could not be fitted"
    if positive and value <= 0:
        return None, f"{name} fitted as {value:.3g} <= 0: the log l form does not describe the data"
    return value, None
