"""The one evidence scale of flawmix: the words every verdict and test line uses for a
p-value or a difference in predictive accuracy, so text and numbers always agree.

Convention, not theorem (common practice of applied statistics; the p-value bands follow the
usual 0.1 / 0.05 / 0.01 / 0.001 steps, the ΔLOO bands the usual reading of a difference in
expected log predictive density against its standard error, under about 2 SE being small).
"""
from __future__ import annotations

import math

# (upper end of the band, words): a p-value below the end falls in that band
P_VALUE_BANDS = (
    (0.001, "very strong evidence"),
    (0.01, "strong evidence"),
    (0.05, "moderate evidence"),
    (0.10, "weak evidence"),
    (math.inf, "no evidence"),
)

# (upper end of |ΔELPD| / SE, words)
LOO_BANDS = (
    (1.0, "no real preference"),
    (2.0, "weak evidence"),
    (4.0, "moderate evidence"),
    (math.inf, "strong evidence"),
)

TEST_LEVEL = 0.05   # the level at which a test's null is said to be rejected


def evidence_words(p_value: float) -> str:
    """Words for the evidence a p-value gives against its null: "very strong evidence"
    (p < 0.001), "strong evidence" (< 0.01), "moderate evidence" (< 0.05), "weak evidence"
    (< 0.10), "no evidence" (otherwise, or when the p-value is missing)."""
    if p_value is None or not math.isfinite(float(p_value)):
        return "no evidence"
    for end, words in P_VALUE_BANDS:
        if p_value < end:
            return words
    return P_VALUE_BANDS[-1][1]


def loo_words(difference: float, standard_error: float) -> str:
    """Words for a difference in expected log predictive density (PSIS-LOO) of two models,
    read against its standard error."""
    if not math.isfinite(standard_error) or standard_error <= 0:
        z = math.inf if difference > 0 else 0.0
    else:
        z = abs(difference) / standard_error
    for end, words in LOO_BANDS:
        if z < end:
            return words
    return LOO_BANDS[-1][1]


def rejects(p_value: float, level: float = TEST_LEVEL) -> bool:
    """True when the test rejects its null at ``level`` (5 % unless said otherwise)."""
    return p_value is not None and math.isfinite(float(p_value)) and p_value < level


def verdict_sentence(p_value: float, against: str) -> str:
    """One sentence for a test, e.g. "p = 0.00077: very strong evidence against one pooled
    population (rejected at the 5 % level)."."""
    words = evidence_words(p_value)
    verdict = "rejected" if rejects(p_value) else "not rejected"
    return f"p = {p_value:.2g}: {words} against {against} ({verdict} at the {TEST_LEVEL * 100:g} % level)."


ONE_POPULATION_ENOUGH = "One population is enough"   # the verdict's lead when the test does not reject


def population_count_verdict(p_value: float, test: str) -> str:
    """The first sentence of a model-comparison verdict, from the p-value of the calibrated
    test of one pooled population: "One population is enough" exactly when that test does
    not reject at the 5 % level, "Several flaw populations" otherwise."""
    sentence = verdict_sentence(p_value, "one pooled population")
    lead = "Several flaw populations" if rejects(p_value) else ONE_POPULATION_ENOUGH
    return f"{lead}: {sentence[:-1]}; test: {test}."
