"""The coupled Gumbel-max sampler draws from the distribution it claims."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from scipy import stats

from samplewright import Preset, shape
from samplewright.core.sampling import sampler


def test_gumbel_worked_example():
    # Gumbel-max: argmax(log p + g), g = -log(-log u) (Gumbel 1954, "Statistical Theory of Extreme
    # Values and Some Practical Applications"; as a sampler, Maddison, Tarlow & Minka 2014, "A*
    # Sampling"). Worked example in docs/sampling-chain.md: p = [0.5, 0.3, 0.2], u = [0.3, 0.8, 0.5].
    g = sampler.gumbel([0.3, 0.8, 0.5])
    assert g.tolist() == pytest.approx([-0.185627, 1.499940, 0.366513], abs=1e-6)
    log_p = torch.tensor([[0.5, 0.3, 0.2]], dtype=torch.float64).log()
    assert int(sampler.draw(log_p, g.unsqueeze(0))) == 1


@pytest.mark.parametrize("top_k, expected", [(2, 1), (1, 0)])
def test_truncation_worked_example(top_k, expected):
    # On the kept set log p' = log p - const, so with top_k 2 the scores shift by a constant on ids 0, 1
    # (still token 1); with top_k 1 only token 0 can win (docs/sampling-chain.md, "Drawing a token").
    logits = np.log([0.5, 0.3, 0.2])
    shaped = torch.from_numpy(shape(logits, Preset("k", top_k=top_k))).unsqueeze(0)
    g = sampler.gumbel([0.3, 0.8, 0.5]).unsqueeze(0)
    assert int(sampler.draw(shaped.log(), g)) == expected


def test_uniforms_stay_strictly_inside_the_unit_interval():
    # -log(-log u) is -inf at u = 0 and +inf at u = 1 (Gumbel 1954), so u must stay inside (0, 1).
    u = sampler.uniforms(0, 0, 0, 200_000)
    assert u.min() > 0 and u.max() < 1
    assert torch.isfinite(sampler.gumbel(np.array([0.0, 1.0]).clip(sampler.U_MIN, sampler.U_MAX))).all()


def test_noise_is_keyed_by_seed_sample_and_step():
    base = sampler.uniforms(5, 1, 2, 50)
    assert np.array_equal(base, sampler.uniforms(5, 1, 2, 50))
    for other in [(6, 1, 2), (5, 2, 2), (5, 1, 3)]:
        assert not np.array_equal(base, sampler.uniforms(*other, 50))


def _draw_counts(logits: np.ndarray, preset: Preset, draws: int, seed: int = 11) -> np.ndarray:
    log_p = torch.from_numpy(shape(logits, preset)).log()
    noise = torch.stack([sampler.noise(seed, 0, step, len(logits)) for step in range(draws)])
    ids = sampler.draw(log_p.expand(draws, -1), noise)
    return np.bincount(ids.numpy(), minlength=len(logits))


@pytest.mark.parametrize(
    "preset",
    [
        Preset("warm", temperature=1.3),
        Preset("cut", temperature=0.8, top_k=6),
        Preset("nucleus", top_p=0.8, min_p=0.02),
    ],
)
def test_draws_follow_the_shaped_distribution(preset):
    # The Gumbel-max trick (Maddison, Tarlow & Minka 2014) samples exactly p;
    # checked with a chi-square goodness-of-fit test (scipy.stats.chisquare).
    logits = np.array([2.0, 1.5, 1.4, 0.3, 0.0, -0.5, -1.0, -2.0, -3.0, 0.9])
    draws = 20_000
    counts = _draw_counts(logits, preset, draws)
    expected = shape(logits, preset) * draws
    kept = expected > 0
    assert counts[~kept].sum() == 0  # removed tokens are never drawn
    assert stats.chisquare(counts[kept], expected[kept]).pvalue > 1e-3


def test_chi_square_would_notice_a_wrong_distribution():
    # The same test has the power to reject: draws at temperature 1.3 do not
    # follow the temperature-1 distribution.
    logits = np.array([2.0, 1.5, 1.4, 0.3, 0.0, -0.5, -1.0, -2.0, -3.0, 0.9])
    counts = _draw_counts(logits, Preset("warm", temperature=1.3), 20_000)
    expected = shape(logits, Preset("plain")) * 20_000
    assert stats.chisquare(counts, expected).pvalue < 1e-6


def test_truncation_keeps_the_coupled_choice_when_it_survives():
    # A direct consequence of the Gumbel-max form (Maddison, Tarlow & Minka 2014, "A* Sampling"):
    # truncation only removes ids and shifts the kept scores by a constant, so at the same
    # temperature a top-k preset picks the untruncated preset's token whenever it survives the cut.
    rng = np.random.default_rng(3)
    logits = rng.normal(0, 2, 300)
    plain = torch.from_numpy(shape(logits, Preset("plain"))).log()
    cut = torch.from_numpy(shape(logits, Preset("k", top_k=5))).log()
    top5 = set(np.argsort(-logits)[:5].tolist())
    agree = 0
    for step in range(400):
        g = sampler.noise(0, 0, step, len(logits)).unsqueeze(0)
        a, b = int(sampler.draw(plain.unsqueeze(0), g)), int(sampler.draw(cut.unsqueeze(0), g))
        if a in top5:
            assert b == a
            agree += 1
    assert agree > 0


def test_noise_for_all_rows_in_one_call_equals_each_rows_own_stream():
    # The batched call must give row r exactly noise(seed, sample_indices[r], step):
    # the coupling (common random numbers) depends on it.
    indices = [2, 0, 2, 1, 0]
    table = sampler.noise_rows(7, indices, 3, 300)
    assert table.shape == (5, 300) and table.dtype == torch.float64
    for row, index in zip(table, indices, strict=True):
        assert torch.equal(row, sampler.noise(7, index, 3, 300))
