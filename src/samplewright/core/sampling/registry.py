"""The stage registry: everything about each sampling stage, in one entry.

An entry (:class:`Stage`) holds the stage's name in a preset's ``order``, its
label (the trade's name), how the step view marks a token the stage cut, its
parameters with their ranges and neutral values (:class:`~..fields.NumberField`),
the values the editor gives them when the user switches the stage on, the
published source, and the function that applies it. The chain, the
neutral-stage skip, the plot's legend and marks, the preset editor and the
settings-file schema test all read from here.

Adding a stage means one :func:`register` call (an entry below) plus its
function. A stage that brings a new parameter also adds that parameter to
:class:`~..presets.Preset` and to ``resources/settings.schema.json``: the
preset and the file format are published contracts, and tests fail until
both match the entry (see docs/sampling-chain.md, "Adding a stage").

A stage function takes ``(logits, params, history)``: float64 logits (rows ×
vocab, ``-inf`` = removed), the rows' parameters (``params.values[field]``,
one value per row) and what the rows have seen (``RowHistory``); it returns
new logits and never modifies its input. At the neutral values of all its
fields it must return its input unchanged (the chain then skips it).

This module imports neither torch nor Qt (the stage functions import torch
when they first run), so presets can check their ``order`` cheaply.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

from ..fields import NumberField

if TYPE_CHECKING:
    import torch

    from .chain import RowHistory, RowParams

StageFunction = Callable[["torch.Tensor", "RowParams", "RowHistory"], "torch.Tensor"]

#: Shapes a stage's mark can take; the Qt layer maps each to a plot symbol.
MARK_SHAPES = ("circle", "square", "triangle", "diamond", "cross", "star", "hexagon", "plus")
#: Hatches a cut token's outline bar can be filled with; the Qt layer maps each to a brush pattern.
HATCHES = ("diagonal", "back_diagonal", "horizontal", "vertical", "grid", "dots", "diagonal_grid")


@dataclasses.dataclass(frozen=True)
class StageMark:
    """How the step view marks a token this stage cut.

    Attributes:
        colour: hex colour of the mark and the hatch.
        shape: one of :data:`MARK_SHAPES`, drawn beside the cut token's bar.
        hatch: one of :data:`HATCHES`, filling the cut token's outline bar.
        glyph: the shape as a text character, for legends written in text.
    """

    colour: str
    shape: str
    hatch: str
    glyph: str


@dataclasses.dataclass(frozen=True)
class Stage:
    """One sampling stage.

    Attributes:
        name: the stage's name in a preset's ``order`` (``top_p``).
        label: the trade's name, shown to the user (``top-p``).
        summary: one plain sentence on what the stage does.
        source: the published source of the method (author, year, title).
        mark: how the step view marks a token this stage cut.
        fields: the stage's parameters, each with its range and neutral value.
        apply: the stage function, ``(logits, params, history) -> logits``.
        starting: the value the editor gives each field when the user switches the stage on
            (a field left out starts at its neutral value); at least one must differ from neutral.
    """

    name: str
    label: str
    summary: str
    source: str
    mark: StageMark
    fields: tuple[NumberField, ...]
    apply: StageFunction
    starting: tuple[tuple[str, float], ...] = ()

    @property
    def neutral(self) -> dict[str, float]:
        """The value of each field at which the stage changes nothing."""
        return {f.name: f.neutral for f in self.fields if f.neutral is not None}

    @property
    def switched_on(self) -> dict[str, float]:
        """The value of each field when the user switches the stage on (neutral unless ``starting`` says)."""
        return {**self.neutral, **dict(self.starting)}

    def is_off(self, preset: Any) -> bool:
        """True when every field holds its neutral value in ``preset`` (a stage without fields always acts)."""
        return bool(self.fields) and all(getattr(preset, f.name) == f.neutral for f in self.fields)


_STAGES: dict[str, Stage] = {}


def register(stage: Stage) -> Stage:
    """Add a stage at the end of the registry; returns it.

    Raises:
        ValueError: a stage of that name exists, a field name is taken, a field
            has no neutral value, the mark's shape or hatch is unknown, or the
            starting values name an unknown field, leave the range, or leave the stage off.
    """
    if stage.name in _STAGES:
        raise ValueError(f"a stage named {stage.name!r} is registered already")
    taken = {f.name for s in _STAGES.values() for f in s.fields}
    for field in stage.fields:
        if field.name in taken:
            raise ValueError(f"field {field.name!r} of stage {stage.name!r} belongs to another stage")
        if field.neutral is None:
            raise ValueError(f"field {field.name!r} of stage {stage.name!r} needs a neutral value")
    if stage.mark.shape not in MARK_SHAPES or stage.mark.hatch not in HATCHES:
        raise ValueError(f"stage {stage.name!r}: mark shape must be one of {MARK_SHAPES}, hatch one of {HATCHES}")
    _check_starting(stage)
    _STAGES[stage.name] = stage
    return stage


def _check_starting(stage: Stage) -> None:
    """Refuse starting values that are not the stage's fields, leave their range, or keep it off."""
    fields = {f.name: f for f in stage.fields}
    for name, value in stage.starting:
        if name not in fields or not fields[name].contains(value):
            raise ValueError(
                f"stage {stage.name!r}: starting value {name}={value!r} is not an allowed value of its fields"
            )
    if stage.fields and stage.switched_on == stage.neutral:
        raise ValueError(f"stage {stage.name!r} needs a starting value other than neutral, so switching it on acts")


def unregister(name: str) -> None:
    """Remove a stage (tests use this to take away a throwaway stage)."""
    del _STAGES[name]


def stages() -> tuple[Stage, ...]:
    """Every registered stage, in registration order (the built-in ones in the default order)."""
    return tuple(_STAGES.values())


def names() -> tuple[str, ...]:
    """The names of every registered stage, in registration order."""
    return tuple(_STAGES)


def stage(name: str) -> Stage:
    """The stage called ``name``; KeyError if there is none."""
    return _STAGES[name]


def stage_fields() -> tuple[NumberField, ...]:
    """Every stage's parameters, stage by stage in registration order."""
    return tuple(f for s in _STAGES.values() for f in s.fields)


# -- the built-in stages' functions ---------------------------------------------------------------
# Each imports the torch kernels of core/sampling/stages.py when it first runs.


def _penalties(logits, params, history):
    from . import stages as kernels

    # Inside the stage: repetition, then frequency/presence, then no-repeat n-gram. A part whose
    # parameters are neutral for every row is skipped: it would return its input unchanged.
    values = params.values
    out = logits
    if bool((values["repetition_penalty"] != 1.0).any()):
        out = kernels.repetition_penalty(out, values["repetition_penalty"], history.seen)
    if bool((values["frequency_penalty"] != 0.0).any() | (values["presence_penalty"] != 0.0).any()):
        out = kernels.frequency_presence(out, values["frequency_penalty"], values["presence_penalty"], history.counts)
    if bool((values["no_repeat_ngram_size"] > 0).any()):
        out = kernels.no_repeat_ngram(out, history.banned)
    return out


def _one_parameter(name: str) -> StageFunction:
    """The function of a stage with one parameter, named like the stage and its kernel in stages.py."""

    def apply(logits, params, history):
        from . import stages as kernels

        return getattr(kernels, name)(logits, params.values[name])

    apply.__name__ = f"_{name}"
    return apply


# -- the built-in stages, in the default order ----------------------------------------------------
# Mark colours: the "muted" qualitative scheme of Tol (2021), "Colour Schemes", SRON technical
# note SRON/EPS/TN/09-002 (hex values from memory), kept apart from the Okabe & Ito colours that
# tell the presets apart; shape and hatch are the second and third cues, so colour is never the only one.
# Starting values (what switching a stage on in the editor gives it) are common practice, the middle
# of what teams usually try, not tuned results.

register(
    Stage(
        name="penalties",
        label="repetition penalties",
        summary="Makes tokens already used less likely, or forbids repeating a run of tokens.",
        source=(
            "Keskar et al. (2019), CTRL, arXiv:1909.05858 (repetition penalty); Paulus, Xiong & Socher (2017), "
            "arXiv:1705.04304 (no-repeat n-gram); frequency/presence: a hosted-API convention, no paper"
        ),
        mark=StageMark(colour="#882255", shape="cross", hatch="grid", glyph="✕"),
        fields=(
            NumberField(
                "repetition_penalty",
                0.0,
                10.0,
                1.0,
                "Makes every token already in the passage or sample less likely (above 1) or more likely (below 1).",
                low_open=True,
                neutral=1.0,
            ),
            NumberField(
                "frequency_penalty",
                -2.0,
                2.0,
                0.0,
                "Lowers a token's logit by this much for each time the sample already used it.",
                neutral=0.0,
            ),
            NumberField(
                "presence_penalty",
                -2.0,
                2.0,
                0.0,
                "Lowers a token's logit by this much once the sample has used it at all.",
                neutral=0.0,
            ),
            NumberField(
                "no_repeat_ngram_size",
                0,
                32,
                0,
                "Forbids any token that would repeat a run of this many tokens already in the text.",
                integer=True,
                neutral=0,
            ),
        ),
        apply=_penalties,
        starting=(("repetition_penalty", 1.1),),
    )
)
register(
    Stage(
        name="temperature",
        label="temperature",
        summary="Sharpens (below 1) or flattens (above 1) the whole distribution; 0 always takes the top token.",
        source="Ackley, Hinton & Sejnowski (1985), A Learning Algorithm for Boltzmann Machines",
        mark=StageMark(colour="#999933", shape="circle", hatch="dots", glyph="●"),
        fields=(
            NumberField(
                "temperature",
                0.0,
                5.0,
                1.0,
                "Divides the logits before the softmax: below 1 sharpens, above 1 flattens, "
                "0 always takes the top token.",
                neutral=1.0,
            ),
        ),
        apply=_one_parameter("temperature"),
        starting=(("temperature", 0.8),),
    )
)
register(
    Stage(
        name="top_k",
        label="top-k",
        summary="Keeps only the k most probable tokens.",
        source="Fan, Lewis & Dauphin (2018), Hierarchical Neural Story Generation",
        mark=StageMark(colour="#332288", shape="square", hatch="vertical", glyph="■"),
        fields=(
            NumberField(
                "top_k",
                0,
                1_000_000,  # larger than any vocabulary; the bound keeps absurd values out of tensors
                0,
                "Keeps only the k most probable tokens.",
                integer=True,
                neutral=0,
            ),
        ),
        apply=_one_parameter("top_k"),
        starting=(("top_k", 40),),
    )
)
register(
    Stage(
        name="top_p",
        label="top-p",
        summary="Keeps the most probable tokens until their probabilities add up to p.",
        source="Holtzman, Buys, Du, Forbes & Choi (2020), The Curious Case of Neural Text Degeneration, eq. 2",
        mark=StageMark(colour="#44AA99", shape="triangle", hatch="diagonal", glyph="▲"),
        fields=(
            NumberField(
                "top_p",
                0.0,
                1.0,
                1.0,
                "Nucleus sampling: keeps the most probable tokens until their probabilities add up to p.",
                low_open=True,
                neutral=1.0,
            ),
        ),
        apply=_one_parameter("top_p"),
        starting=(("top_p", 0.9),),
    )
)
register(
    Stage(
        name="min_p",
        label="min-p",
        summary="Drops every token less likely than a fraction of the top token's probability.",
        source="Nguyen et al. (2024), Turning Up the Heat: Min-p Sampling for Creative and Coherent LLM Outputs",
        mark=StageMark(colour="#CC6677", shape="diamond", hatch="horizontal", glyph="◆"),
        fields=(
            NumberField(
                "min_p",
                0.0,
                1.0,
                0.0,
                "Drops every token less likely than this fraction of the top token's probability.",
                high_open=True,
                neutral=0.0,
            ),
        ),
        apply=_one_parameter("min_p"),
        starting=(("min_p", 0.05),),
    )
)
register(
    Stage(
        name="typical_p",
        label="typical",
        summary="Keeps the tokens whose surprise is closest to the average until they hold a share of the mass.",
        source="Meister, Pimentel, Wiher & Cotterell (2023), Locally Typical Sampling",
        mark=StageMark(colour="#AA4499", shape="star", hatch="back_diagonal", glyph="★"),
        fields=(
            NumberField(
                "typical_p",
                0.0,
                1.0,
                1.0,
                "Typical sampling: keeps the tokens whose surprise is closest to the average "
                "until they hold this mass.",
                low_open=True,
                neutral=1.0,
            ),
        ),
        apply=_one_parameter("typical_p"),
        starting=(("typical_p", 0.9),),
    )
)
