"""One copy of the passage's keys and values for every row: shared-prefix attention.

All rows of an audition continue the same passage, so their caches agree on
the passage part. Instead of a copy per row, :class:`SharedPassageCache`
keeps the passage's keys and values once (batch size 1) and a preallocated
buffer for each row's generated part. Attention for a decoding step is split
in two, as in Juravsky et al. (2024), "Hydragen: High-Throughput LLM
Inference with Shared Prefixes", arXiv:2402.05099, section 3:

* over the shared passage, the queries of every row (and every query head
  of a key/value group) are stacked into one matrix product with the one
  copy of the passage keys;
* over each row's own generated part, an ordinary batched product;
* the two partial softmax results are recombined with their log-sum-exp:
  ``out = exp(lse_1 - lse) o_1 + exp(lse_2 - lse) o_2`` with
  ``lse = logaddexp(lse_1, lse_2)``, which equals attention over the whole
  row exactly (up to rounding).

It plugs into transformers through its attention interface
(``AttentionInterface.register``): the model's attention layers call
:func:`attention` with the keys and values :meth:`SharedPassageLayer.update`
returned (the row's generated part) and the shared cache passed through the
forward call's keyword arguments. Any other call (the passage's own forward
pass, generate(), the step view) goes to transformers' SDPA attention with
SDPA's masks, so the plain path is unchanged.
"""

from __future__ import annotations

from typing import Any

import torch
from transformers.cache_utils import Cache, CacheLayerMixin

#: Name of the attention implementation registered with transformers.
ATTENTION_NAME = "samplewright_shared_passage"
#: Keyword argument that carries the shared cache to the attention layers.
SHARED_KWARG = "shared_passage"
#: Model families whose attention layers call the attention interface with
#: full (not sliding-window) attention over the cache, checked by the tests
#: for Llama (the default model, SmolLM2, is a Llama).
SUPPORTED_FAMILIES = frozenset({"llama"})
#: First capacity of the generated part; it doubles when a run needs more.
FIRST_CAPACITY = 64


class SharedPassageLayer(CacheLayerMixin):
    """One layer's cache: the passage once, plus each row's generated part.

    ``prefix_keys``/``prefix_values`` are (1, kv heads, passage, head dim) and
    never written; ``row_keys``/``row_values`` are (rows, kv heads, capacity,
    head dim) buffers whose first ``filled`` positions hold the generated tokens.
    """

    is_sliding = False

    def __init__(self, prefix_keys: torch.Tensor, prefix_values: torch.Tensor, rows: int, capacity: int):
        super().__init__()
        self.prefix_keys, self.prefix_values = prefix_keys, prefix_values
        _, heads, _, dim = prefix_keys.shape
        self.row_keys: torch.Tensor = prefix_keys.new_empty(rows, heads, capacity, dim)
        self.row_values: torch.Tensor = prefix_values.new_empty(rows, heads, capacity, prefix_values.shape[-1])
        self.filled = 0
        self.device = prefix_keys.device
        self.is_initialized = True

    def lazy_initialization(self, key_states: torch.Tensor, value_states: torch.Tensor) -> None:
        """Nothing to do: the buffers exist from the start."""

    def update(self, key_states: torch.Tensor, value_states: torch.Tensor, *args, **kwargs):
        """Write the new tokens' keys and values in place; return the generated part so far."""
        end = self.filled + key_states.shape[-2]
        if end > self.row_keys.shape[-2]:
            self._grow(end)
        self.row_keys[:, :, self.filled : end] = key_states
        self.row_values[:, :, self.filled : end] = value_states
        self.filled = end
        return self.row_keys[:, :, :end], self.row_values[:, :, :end]

    def _grow(self, needed: int) -> None:
        capacity = max(needed, 2 * self.row_keys.shape[-2])
        keys = self.row_keys.new_empty(*self.row_keys.shape[:2], capacity, self.row_keys.shape[-1])
        values = self.row_values.new_empty(*self.row_values.shape[:2], capacity, self.row_values.shape[-1])
        keys[:, :, : self.filled] = self.row_keys[:, :, : self.filled]
        values[:, :, : self.filled] = self.row_values[:, :, : self.filled]
        self.row_keys, self.row_values = keys, values

    def get_mask_sizes(self, query_length: int) -> tuple[int, int]:
        """Length and offset of the keys a query sees (for transformers' mask code)."""
        return self.get_seq_length() + query_length, 0

    def get_seq_length(self) -> int:
        """Tokens before the next one: the passage plus the generated part."""
        return self.prefix_keys.shape[-2] + self.filled

    def get_max_length(self) -> int:
        """No fixed maximum: the generated part grows when it must."""
        return -1

    def batch_select_indices(self, indices: torch.Tensor) -> None:
        """Keep only the rows at ``indices`` (the passage part is shared and stays)."""
        self.row_keys = self.row_keys.index_select(0, indices)
        self.row_values = self.row_values.index_select(0, indices)


class SharedPassageCache(Cache):
    """A cache for ``rows`` rows continuing one passage, built from the passage's
    own single-row cache (which it reads but never modifies)."""

    def __init__(self, passage_cache: Cache, rows: int, capacity: int = FIRST_CAPACITY):
        layers: list[SharedPassageLayer] = []
        for layer in passage_cache.layers:
            keys, values = getattr(layer, "keys", None), getattr(layer, "values", None)
            if not isinstance(keys, torch.Tensor) or not isinstance(values, torch.Tensor):
                raise TypeError("the shared passage cache needs an attention key/value cache in every layer")
            layers.append(SharedPassageLayer(keys, values, rows, max(1, capacity)))
        super().__init__(layers=list(layers))
        self.shared_layers = layers

    def layer(self, index: int) -> SharedPassageLayer:
        """The cache of attention layer ``index``."""
        return self.shared_layers[index]


def shared_prefix_attention(
    query: torch.Tensor,
    prefix_keys: torch.Tensor,
    prefix_values: torch.Tensor,
    keys: torch.Tensor,
    values: torch.Tensor,
    scaling: float,
) -> torch.Tensor:
    """Attention of one new token per row over a shared prefix and its own suffix.

    Args:
        query: (rows, heads, 1, head dim) queries of the newest token.
        prefix_keys, prefix_values: (1, kv heads, prefix, head dim), shared by all rows.
        keys, values: (rows, kv heads, suffix, head dim), each row's own part
            (the newest token included, so it is never empty).
        scaling: the softmax scale (usually head dim ** -0.5).

    Returns:
        (rows, 1, heads, head dim), the layout transformers' attention functions return.
    """
    rows, heads, length, dim = query.shape
    if length != 1:
        raise ValueError("shared-prefix attention takes one new token per row")
    groups = heads // keys.shape[1]
    kv_heads = keys.shape[1]
    work = torch.float32 if query.dtype in (torch.float16, torch.bfloat16) else query.dtype
    q = query.view(rows, kv_heads, groups, dim).to(work)
    # Prefix: every row's queries of one key/value head against the one prefix copy.
    stacked = q.permute(1, 0, 2, 3).reshape(kv_heads, rows * groups, dim)
    scores = torch.matmul(stacked, prefix_keys[0].to(work).transpose(-1, -2)) * scaling
    lse_prefix = torch.logsumexp(scores, dim=-1, keepdim=True)
    out_prefix = torch.matmul(torch.exp(scores - lse_prefix), prefix_values[0].to(work))
    out_prefix = out_prefix.view(kv_heads, rows, groups, dim).permute(1, 0, 2, 3)
    lse_prefix = lse_prefix.view(kv_heads, rows, groups, 1).permute(1, 0, 2, 3)
    # Suffix: each row against its own generated part.
    scores = torch.matmul(q, keys.to(work).transpose(-1, -2)) * scaling
    lse_suffix = torch.logsumexp(scores, dim=-1, keepdim=True)
    out_suffix = torch.matmul(torch.exp(scores - lse_suffix), values.to(work))
    # Hydragen's recombination (Juravsky et al. 2024, section 3): weights from the two log-sum-exps.
    lse = torch.logaddexp(lse_prefix, lse_suffix)
    out = torch.exp(lse_prefix - lse) * out_prefix + torch.exp(lse_suffix - lse) * out_suffix
    return out.to(query.dtype).reshape(rows, heads, 1, dim).transpose(1, 2)


def attention(module, query, key, value, attention_mask, dropout: float = 0.0, scaling=None, **kwargs) -> Any:
    """transformers attention function: shared-prefix attention when the forward
    call carries a :class:`SharedPassageCache`, SDPA attention otherwise."""
    shared = kwargs.pop(SHARED_KWARG, None)
    if isinstance(shared, SharedPassageCache):
        layer = shared.layer(module.layer_idx)
        scale = scaling if scaling is not None else query.shape[-1] ** -0.5
        return shared_prefix_attention(query, layer.prefix_keys, layer.prefix_values, key, value, scale), None
    from transformers.integrations.sdpa_attention import sdpa_attention_forward

    return sdpa_attention_forward(module, query, key, value, attention_mask, dropout=dropout, scaling=scaling, **kwargs)


def supports(model) -> bool:
    """True when ``model`` can use the shared passage cache (a supported family
    running SDPA attention, whose masks and fallback this module reuses)."""
    config = model.config
    return (
        getattr(config, "model_type", None) in SUPPORTED_FAMILIES
        and getattr(config, "_attn_implementation", None) in ("sdpa", ATTENTION_NAME)
        and not getattr(config, "sliding_window", None)
    )


def install(model) -> bool:
    """Switch ``model`` to the shared-passage attention if it supports it.

    Returns:
        True when installed (the model's plain calls still run SDPA attention).
    """
    if not supports(model):
        return False
    from transformers import AttentionInterface
    from transformers.masking_utils import ALL_MASK_ATTENTION_FUNCTIONS, sdpa_mask

    AttentionInterface.register(ATTENTION_NAME, attention)
    ALL_MASK_ATTENTION_FUNCTIONS.register(ATTENTION_NAME, sdpa_mask)
    if model.config._attn_implementation != ATTENTION_NAME:
        model.set_attn_implementation(ATTENTION_NAME)
    return True
