"""The evidence scale: one set of words for p-values and ΔLOO, used by every verdict."""
import pytest

from flawmix.evidence import evidence_words, loo_words, population_count_verdict, rejects, verdict_sentence


@pytest.mark.parametrize("p, words", [(6.7e-06, "very strong evidence"), (0.00077, "very strong evidence"),
                                      (0.004, "strong evidence"), (0.03, "moderate evidence"),
                                      (0.07, "weak evidence"), (0.4, "no evidence"), (float("nan"), "no evidence")])
def test_p_value_bands(p, words):
    # bands 0.001 / 0.01 / 0.05 / 0.10: common practice (documented as convention in evidence.py)
    assert evidence_words(p) == words


def test_a_rejected_null_is_never_described_as_weak():
    # issue 10: p = 6.7e-06 printed next to "weak evidence" is the contradiction to avoid
    for p in (1e-8, 6.7e-06, 0.00077, 0.02, 0.049):
        assert rejects(p) and "weak" not in evidence_words(p) and "no evidence" not in evidence_words(p)
        assert "rejected at the 5 % level" in verdict_sentence(p, "one population")
    assert "not rejected" in verdict_sentence(0.2, "one population")


def test_loo_bands_read_the_difference_against_its_standard_error():
    assert loo_words(0.5, 1.0) == "no real preference"
    assert loo_words(-3.0, 2.0) == "weak evidence"
    assert loo_words(7.0, 2.0) == "moderate evidence"
    assert loo_words(20.0, 2.0) == "strong evidence"


@pytest.mark.parametrize("p", [0.0004, 0.03, 0.049, 0.05, 0.2, 0.9])
def test_the_one_population_lead_agrees_with_the_test(p):
    # "one population is enough" exactly when the test does not reject at 5 % (issue 12)
    lead = population_count_verdict(p, "a bootstrap test")
    assert lead.startswith("Several flaw populations" if rejects(p) else "One population is enough")
    assert evidence_words(p) in lead and "a bootstrap test" in lead
