"""How faithfully an engine reproduces a preset, measured.

The target's chain (transformers: its own processors; vLLM and
OpenAI-compatible servers: :mod:`.vllm_target`'s implementation of vLLM's
source) and samplewright's :func:`shape` are run on the same steps: 1,000
random logit vectors (a quarter of them rounded to quarters, so tokens tie),
and, when a model is given, its real next-token logits along samples of the
demo passages. Per step the total-variation distance
``TV(p, q) = ½ Σ |p_i - q_i|`` is taken (Levin, Peres & Wilmer, "Markov Chains
and Mixing Times", 2009, §4.1).

Verdict: **exact** when every step's distance is below 1e-9; **exact except
ties** when that holds on every step where no cut fell on a tie (see
:mod:`.cuts`) but not on all; **differs** otherwise.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import torch

from ..presets import Preset
from ..sampling.chain import shape
from . import targets
from .common import StepFunction, samplewright_step

EXACT = "exact"
EXACT_EXCEPT_TIES = "exact except ties"
DIFFERS = "differs"
THRESHOLD = 1e-9
RANDOM_STEPS = 1000
RANDOM_VOCAB = 48
RANDOM_SEED = 20261203


@dataclasses.dataclass(frozen=True)
class Step:
    """One next-token step: raw logits (1-D float64), the ids before it, the generated ids."""

    logits: torch.Tensor
    history: tuple[int, ...]
    generated: tuple[int, ...]


@dataclasses.dataclass(frozen=True)
class Measure:
    """Distances between two chains over a set of steps."""

    max_tv: float
    mean_tv: float
    differing_share: float
    max_tv_away_from_ties: float
    steps: int
    tie_steps: int

    @property
    def verdict(self) -> str:
        """exact, exact except ties, or differs (thresholds in the module docstring)."""
        if self.max_tv < THRESHOLD:
            return EXACT
        return EXACT_EXCEPT_TIES if self.max_tv_away_from_ties < THRESHOLD else DIFFERS


@dataclasses.dataclass(frozen=True)
class Closest:
    """The nearest preset the target can express, its distance from the original and its own verdict."""

    preset: Preset
    from_original: Measure
    verdict_on_target: str


@dataclasses.dataclass(frozen=True)
class Fidelity:
    """The fidelity report of one preset for one target."""

    preset: Preset
    target: str
    measure: Measure
    reasons: tuple[str, ...]
    parameters: Mapping[str, Any]
    model_steps: int
    closest: Closest | None

    @property
    def verdict(self) -> str:
        """The measured verdict."""
        return self.measure.verdict

    def to_json(self) -> dict[str, Any]:
        """The report as the CLI's ``fidelity --json`` prints it."""
        out: dict[str, Any] = {
            "preset": self.preset.name,
            "target": self.target,
            "verdict": self.verdict,
            "reasons": list(self.reasons),
            "max_tv": self.measure.max_tv,
            "mean_tv": self.measure.mean_tv,
            "differing_share": self.measure.differing_share,
            "parameters": dict(self.parameters),
        }
        if self.closest is not None:
            out["closest"] = {
                "preset": self.closest.preset.to_dict(),
                "max_tv_from_original": self.closest.from_original.max_tv,
                "mean_tv_from_original": self.closest.from_original.mean_tv,
                "verdict_on_target": self.closest.verdict_on_target,
            }
        return out


def random_steps(count: int = RANDOM_STEPS, vocab: int = RANDOM_VOCAB, seed: int = RANDOM_SEED) -> list[Step]:
    """Random float64 logit vectors with random passages and generated tokens.

    Every fourth vector is rounded to quarters so ties occur at cuts; ids are
    drawn from a small range so repetitions and repeated n-grams occur.
    """
    rng = np.random.default_rng(seed)
    steps = []
    for index in range(count):
        logits = rng.normal(0.0, 2.5, vocab)
        if index % 4 == 0:
            logits = np.round(logits * 4) / 4
        passage = rng.integers(0, vocab // 2, int(rng.integers(1, 16)))
        generated = rng.integers(0, vocab, int(rng.integers(0, 10)))
        history = tuple(int(i) for i in passage) + tuple(int(i) for i in generated)
        steps.append(Step(torch.from_numpy(logits), history, tuple(int(i) for i in generated)))
    return steps


def model_steps(loaded, preset: Preset, passages: Mapping[str, str], tokens: int = 12, seed: int = 0) -> list[Step]:
    """The model's real next-token logits along one sample of each passage,
    the sample drawn from ``preset``'s own distribution (a seeded draw)."""
    from ..engine.engine import Engine

    engine = Engine(loaded)
    rng = np.random.default_rng(seed)
    steps = []
    with torch.inference_mode():
        for text in passages.values():
            ids = tuple(engine.encode_passage(text).ids)
            state = engine.passage_state(ids)
            logits, cache = state.logits, engine.copy_cache(state, 1)
            generated: tuple[int, ...] = ()
            for _ in range(tokens):
                row = logits.to(torch.float64)
                steps.append(Step(row, ids + generated, generated))
                probs = shape(row, preset, ids + generated, generated)
                token = int(rng.choice(probs.shape[0], p=probs / probs.sum()))
                generated += (token,)
                out, cache = engine.forward(torch.tensor([[token]], dtype=torch.long), cache)
                logits = out[0]
    return steps


def compare(steps: Sequence[Step], first: StepFunction, second: StepFunction) -> Measure:
    """Total-variation distances between two chains on ``steps``."""
    distances, ties = [], []
    for step in steps:
        a = first(step.logits, step.history, step.generated)
        b = second(step.logits, step.history, step.generated)
        distances.append(0.5 * float(np.abs(a.probs - b.probs).sum()))
        ties.append(a.tie or b.tie)
    tv = np.asarray(distances)
    tie = np.asarray(ties, dtype=bool)
    away = tv[~tie]
    return Measure(
        max_tv=float(tv.max(initial=0.0)),
        mean_tv=float(tv.mean()) if tv.size else 0.0,
        differing_share=float((tv >= THRESHOLD).mean()) if tv.size else 0.0,
        max_tv_away_from_ties=float(away.max(initial=0.0)),
        steps=int(tv.size),
        tie_steps=int(tie.sum()),
    )


def fidelity(
    preset: Preset,
    target: str,
    loaded=None,
    passages: Mapping[str, str] | None = None,
    random_count: int = RANDOM_STEPS,
    model_tokens: int = 12,
) -> Fidelity:
    """Measure how ``target`` reproduces ``preset``, and offer the closest expressible preset.

    Args:
        preset: the preset.
        target: ``transformers``, ``vllm`` or ``openai-request``.
        loaded: a LoadedModel for the real-distribution steps (None: random vectors only).
        passages: the passages to sample along (default: the demo passages).
        random_count: how many random logit vectors.
        model_tokens: steps per passage sample.
    """
    module = targets.module(target)
    steps = random_steps(random_count)
    n_model = 0
    if loaded is not None:
        if passages is None:
            from ..engine.passages import demo_passages

            passages = demo_passages()
        extra = model_steps(loaded, preset, passages, model_tokens)
        steps += extra
        n_model = len(extra)
    measure = compare(steps, samplewright_step(preset), targets.chain(target, preset))
    reasons = list(module.gaps(preset))
    if measure.verdict == EXACT_EXCEPT_TIES:
        reasons.append(
            f"on {measure.tie_steps} of {measure.steps} steps tokens tied at a cut (equal logits, or a mass "
            "on the edge of p): the engine settles those its own way, samplewright keeps the lower ids"
        )
    if measure.verdict == DIFFERS and not reasons:
        reasons.append("the measured distributions differ")
    closest = None
    if measure.verdict == DIFFERS:
        variant = module.closest(preset)
        if variant.parameters() != preset.parameters():
            own = compare(steps, samplewright_step(variant), targets.chain(target, variant)).verdict
            closest = Closest(variant, compare(steps, samplewright_step(preset), samplewright_step(variant)), own)
    return Fidelity(preset, target, measure, tuple(reasons), targets.parameters(target, preset), n_model, closest)


def verify_folder(folder, preset: Preset, loaded, passage: str, samples: int = 3, tokens: int = 16) -> Measure:
    """Run an exported transformers folder through generate()'s own processors
    (built on ``loaded``'s model, with its own generation config merged in as
    generate() does) along ``samples`` samples of ``passage``, against :func:`shape`."""
    from . import transformers_target

    steps = model_steps(loaded, preset, {f"sample {i + 1}": passage for i in range(samples)}, tokens)
    exported = transformers_target.chain_from_folder(folder, model=loaded.model)
    return compare(steps, samplewright_step(preset), exported)
