"""Diversity and coherence measures over one preset's samples.

A metric that is undefined for the given samples (one sample, samples
shorter than n) is ``None``, never an exception.

References:
    distinct-n: Li, Galley, Brockett, Gao & Dolan (2016), "A
        Diversity-Promoting Objective Function for Neural Conversation
        Models", NAACL-HLT 2016. We count lowercased whitespace words, pool
        all samples of a preset, and divide distinct n-grams by the number of
        n-grams (the paper divides by the number of words; later code
        usually divides by n-grams, as here).
    self-BLEU: Zhu et al. (2018), "Texygen: A Benchmarking Platform for Text
        Generation Models", SIGIR 2018. Each sample is scored with sacrebleu's
        sentence BLEU (Post 2018) against the others; the mean is divided by
        100. Higher means the samples resemble each other more.
    seq-rep-n: Welleck et al. (2020), "Neural Text Generation with
        Unlikelihood Training", ICLR 2020: per sample, 1 - unique n-grams /
        n-grams over model tokens, averaged over samples with n-grams.
    Surprisal: Shannon (1948). Mean of -log2 p_raw(token) over generated
        tokens, under the unshaped model at temperature 1.
    Coherence: Su & Collier (2023), "Contrastive Search Is What You Need for
        Neural Text Generation", TMLR: the mean log-probability (nats) of the
        sample's tokens under the unshaped model at temperature 1.
    Diversity: Su et al. (2022), "A Contrastive Framework for Neural Text
        Generation", NeurIPS 2022: the product over n = 2..4 of (1 - rep-n),
        rep-n = 1 - unique n-grams / n-grams of one text (whitespace words).
"""

from __future__ import annotations

import dataclasses
import math
from collections import Counter
from collections.abc import Iterable, Sequence

import numpy as np

from ..results import STOP_REASONS, Sample
from . import inspection

METRIC_KEYS = (
    "distinct_1",
    "distinct_2",
    "distinct_3",
    "self_bleu",
    "seq_rep_4",
    "mean_surprisal_bits",
    "mean_kept",
    "mean_length",
)


def entropy_bits(probs) -> float:
    """Shannon entropy in bits of one probability vector, normalised first
    (as ``scipy.stats.entropy`` does); 0·log 0 = 0."""
    p = np.asarray(probs, dtype=np.float64)
    total = p.sum()
    if total <= 0:
        raise ValueError("entropy needs a vector with positive mass")
    return float(inspection.entropy_bits(p / total))


def _ngrams(items: Sequence, n: int) -> list[tuple]:
    return [tuple(items[i : i + n]) for i in range(len(items) - n + 1)]


def distinct_n(texts: Iterable[str], n: int) -> float | None:
    """Distinct n-grams / all n-grams over lowercased whitespace words, pooled
    over ``texts``; ``None`` when there is no n-gram at all."""
    grams: list[tuple] = []
    for text in texts:
        grams.extend(_ngrams(text.lower().split(), n))
    if not grams:
        return None
    return len(set(grams)) / len(grams)


def self_bleu(texts: Sequence[str]) -> float | None:
    """Mean sentence BLEU-4 (sacrebleu) of each text against all the others,
    scaled to 0–1; ``None`` with fewer than two texts."""
    import sacrebleu

    texts = list(texts)
    if len(texts) < 2:
        return None
    scores = [sacrebleu.sentence_bleu(hyp, texts[:i] + texts[i + 1 :]).score for i, hyp in enumerate(texts)]
    return float(np.mean(scores)) / 100.0


def seq_rep_n(token_lists: Iterable[Sequence[int]], n: int = 4) -> float | None:
    """Mean over sequences of 1 - unique n-grams / n-grams; sequences shorter
    than n are skipped; ``None`` when none is long enough."""
    values = []
    for tokens in token_lists:
        grams = _ngrams(list(tokens), n)
        if grams:
            values.append(1.0 - len(set(grams)) / len(grams))
    return float(np.mean(values)) if values else None


def mean_surprisal_bits(raw_probs: Iterable[float]) -> float | None:
    """Mean of -log2 p over the raw probabilities of the drawn tokens."""
    values = [-math.log2(p) if p > 0 else math.inf for p in raw_probs]
    return float(np.mean(values)) if values else None


def coherence(raw_probs: Iterable[float]) -> float | None:
    """Mean natural-log probability of the drawn tokens under the unshaped model
    (Su & Collier 2023); ``None`` when there is no token."""
    values = [math.log(p) if p > 0 else -math.inf for p in raw_probs]
    return float(np.mean(values)) if values else None


def rep_n(words: Sequence[str], n: int) -> float | None:
    """rep-n of one word list (Su et al. 2022): 1 - unique n-grams / n-grams;
    ``None`` when it has fewer than n words."""
    grams = _ngrams(list(words), n)
    if not grams:
        return None
    return 1.0 - len(set(grams)) / len(grams)


def diversity(text: str) -> float | None:
    """Diversity of one text (Su et al. 2022): Π over n = 2..4 of (1 - rep-n) over
    lowercased whitespace words; ``None`` for a text of fewer than 4 words."""
    words = text.lower().split()
    if len(words) < 4:
        return None
    value = 1.0
    for n in (2, 3, 4):
        value *= 1.0 - (rep_n(words, n) or 0.0)  # defined: the text has at least n words
    return value


#: The rule for a degenerate sample: a token 4-gram seen this many times, or an
#: end on EOS within this many tokens.
DEGENERATE_REPEATS = 3
DEGENERATE_EARLY_END = 5


def is_degenerate(token_ids: Sequence[int], stop_reason: str | None) -> bool:
    """True when one model-token 4-gram occurs three or more times in the sample,
    or the sample ended on EOS before writing 5 tokens (see docs/evaluation.md)."""
    if stop_reason == "eos" and len(token_ids) < DEGENERATE_EARLY_END:
        return True
    counts = Counter(_ngrams(list(token_ids), 4))
    return bool(counts) and max(counts.values()) >= DEGENERATE_REPEATS


@dataclasses.dataclass(frozen=True)
class PresetMetrics:
    """The measures of one preset's samples of one audition; ``None`` where undefined."""

    distinct_1: float | None
    distinct_2: float | None
    distinct_3: float | None
    self_bleu: float | None
    seq_rep_4: float | None
    mean_surprisal_bits: float | None
    mean_kept: float | None
    mean_length: float | None
    coherence: float | None = None
    stop_reasons: dict[str, int] = dataclasses.field(default_factory=dict)

    def value(self, key: str) -> float | None:
        """One measure by its key (one of ``METRIC_KEYS`` or ``"coherence"``)."""
        if key not in METRIC_KEYS and key != "coherence":
            raise KeyError(key)
        return getattr(self, key)

    def to_dict(self) -> dict:
        """Plain JSON form: every key of ``METRIC_KEYS``, ``coherence`` and ``stop_reasons``."""
        return dataclasses.asdict(self)

    @classmethod
    def from_dict(cls, data: dict) -> PresetMetrics:
        """Read back :meth:`to_dict`'s form; a missing measure is None (undefined)."""
        values = {f.name: data.get(f.name) for f in dataclasses.fields(cls) if f.name != "stop_reasons"}
        numbers = {k: (None if v is None else float(v)) for k, v in values.items()}
        reasons = {str(k): int(v) for k, v in (data.get("stop_reasons") or {}).items()}
        return cls(**numbers, stop_reasons=reasons)


def preset_metrics(samples: Sequence[Sample]) -> PresetMetrics:
    """All metrics of one preset's samples, with the counts of stop reasons."""
    texts = [s.text for s in samples]
    tokens = [t for s in samples for t in s.tokens]
    reasons = Counter(s.stop_reason for s in samples if s.stop_reason)
    return PresetMetrics(
        distinct_1=distinct_n(texts, 1),
        distinct_2=distinct_n(texts, 2),
        distinct_3=distinct_n(texts, 3),
        self_bleu=self_bleu(texts),
        seq_rep_4=seq_rep_n([s.token_ids for s in samples], 4),
        mean_surprisal_bits=mean_surprisal_bits(t.raw_p for t in tokens),
        mean_kept=float(np.mean([t.kept for t in tokens])) if tokens else None,
        mean_length=float(np.mean([len(s.tokens) for s in samples])) if samples else None,
        coherence=coherence(t.raw_p for t in tokens),
        stop_reasons={r: reasons[r] for r in STOP_REASONS if reasons[r]},
    )
