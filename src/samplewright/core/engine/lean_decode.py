"""A lean decoding step for Llama-family models with the shared passage cache.

At one row and small batches a decoding step of a small model is dominated
by the cost of calling operations, not by the arithmetic: transformers'
modules issue several dozen small operations per layer (each with its
Python module call). :class:`LeanDecoder` runs the same computation as
transformers' Llama modules, for one new token per row, in far fewer
operations:

* the query, key and value projections as one matrix product, and the gate
  and up projections as another (fused weights; the model's own parameters
  are made views into them, so the weights are held once and the plain path
  keeps working);
* ``torch.nn.functional.rms_norm`` for each RMS norm, the residual additions
  folded into ``torch.addmm`` with the output projections;
* rotary position embedding (Su et al. 2021, "RoFormer: Enhanced Transformer
  with Rotary Position Embedding", arXiv:2104.09864) with one cos/sin pair per
  step, computed by the model's own rotary module (so its rope scaling holds),
  and ``rotate_half`` written as a flip of the two halves times a signed sine;
* attention over the shared passage and each row's generated part, recombined
  with their log-sum-exp (Juravsky et al. 2024, "Hydragen", arXiv:2402.05099,
  section 3), each part one call of torch's CPU flash-attention kernel, which
  returns the log-sum-exp with its output (or
  :func:`~samplewright.core.engine.shared_attention.shared_prefix_attention`
  where that kernel is missing or on another device).

Anything it does not handle (other families, biases, another activation,
sliding windows, models in training mode ...) is refused by
:func:`unsupported_reason`, and the backend then uses transformers' modules.

With ``packed=True`` it also keeps the projections in oneDNN's packed layout
(``torch.ops.mkldnn._reorder_linear_weight``), which saves repacking the
weights inside every matrix product: measured 1.2 to 1.4x the lean step's
rate at 16 rows in float32 and about 1.3x in bfloat16 (docs/scaling.md), but
the packed copies add the model's weight memory again, so it is off by default.

Once fused, the projections' parameters share storage, which safetensors'
``save_model`` refuses: :func:`separate` gives them their own tensors again
before such a save (a lean decoder notices and fuses again at its next step).
"""

from __future__ import annotations

import dataclasses
import threading
import weakref
from typing import Any

import torch
import torch.nn.functional as F

from . import shared_attention

#: Activation functions of the MLP the lean step computes (``silu`` as transformers names it).
ACTIVATIONS = frozenset({"silu"})
#: Batch size the packed weights are laid out for (measured as good from 1 to 16 rows).
PACK_ROWS = 16
#: Fewest rows for which the packed products are used in float32 (fewer measured no faster).
PACKED_MIN_ROWS = {torch.float32: 3, torch.bfloat16: 1}
#: Largest extra memory the packed copies may take when packing is left to the backend.
PACKED_BUDGET_BYTES = 768 * 2**20

_DECODERS: weakref.WeakKeyDictionary[Any, dict[bool, LeanDecoder]] = weakref.WeakKeyDictionary()
_DECODERS_LOCK = threading.Lock()


def packed_size(model) -> int:
    """Bytes the packed copies of ``model``'s projections and output head would take."""
    inner = model.model
    weights = [model.lm_head.weight]
    for layer in inner.layers:
        attn, mlp = layer.self_attn, layer.mlp
        weights += [attn.q_proj.weight, attn.k_proj.weight, attn.v_proj.weight, attn.o_proj.weight]
        weights += [mlp.gate_proj.weight, mlp.up_proj.weight, mlp.down_proj.weight]
    return sum(w.numel() * w.element_size() for w in weights)


def shared_decoder(model, packed: bool | None = None) -> LeanDecoder | None:
    """The one lean decoder of ``model`` (None when :func:`unsupported_reason` refuses it).

    Args:
        packed: keep packed weight copies; None packs when :func:`packed_size` is within
            :data:`PACKED_BUDGET_BYTES`.

    Engines over the same model (the window's and its evaluation screen's, on two
    threads) get the same decoder: the fused weights are the model's own either way, and
    the packed copies are made once.
    """
    if unsupported_reason(model) is not None:
        return None
    if packed is None:
        packed = packed_size(model) <= PACKED_BUDGET_BYTES
    with _DECODERS_LOCK:
        decoders = _DECODERS.setdefault(model, {})
        if packed not in decoders:
            decoders[packed] = LeanDecoder(model, packed)
        return decoders[packed]


@dataclasses.dataclass
class _Layer:
    """One decoder layer's weights as the lean step uses them (views, no copies)."""

    norm_in: torch.Tensor
    qkv: torch.Tensor  # (query + 2 key/value heads) * head dim × hidden, fused
    out_t: torch.Tensor  # the output projection, transposed (a view)
    norm_post: torch.Tensor
    gate_up: torch.Tensor  # 2 * intermediate × hidden, fused
    down_t: torch.Tensor  # the down projection, transposed (a view)
    # The parameters that must stay views into qkv and gate_up, checked before each step.
    views: tuple[tuple[torch.Tensor, torch.Tensor, int], ...]
    # The same four products in oneDNN's packed layout (copies), when packing is on.
    packed: tuple[torch.Tensor, ...] = ()


def unsupported_reason(model) -> str | None:
    """Why the lean step cannot run ``model`` (None when it can)."""
    config = model.config
    if type(model).__name__ != "LlamaForCausalLM" or getattr(config, "model_type", None) != "llama":
        return f"the lean step handles Llama models, not {type(model).__name__}"
    if model.training:
        return "the model is in training mode"
    if getattr(config, "attention_bias", False) or getattr(config, "mlp_bias", False):
        return "the model's attention or MLP layers have biases"
    if getattr(config, "hidden_act", None) not in ACTIVATIONS:
        return f"the MLP activation {getattr(config, 'hidden_act', None)!r} is not one the lean step computes"
    if getattr(config, "sliding_window", None) or (getattr(config, "pretraining_tp", 1) or 1) != 1:
        return "the model uses sliding-window attention or split projections"
    if getattr(model, "lm_head", None) is None or model.lm_head.bias is not None:
        return "the model's output layer has a bias"
    if len(model.model.layers) != config.num_hidden_layers:
        return "the model's layer count differs from its configuration"
    params = list(model.parameters())
    dtypes = {p.dtype for p in params}
    if len(dtypes) != 1 or not next(iter(dtypes)).is_floating_point or len({p.device for p in params}) != 1:
        return "the model's weights are not all plain floating-point tensors on one device"
    if any(type(p.data) is not torch.Tensor for p in params):
        return "the model's weights are not plain tensors (quantised or wrapped)"
    return None


def _adjacent(weights: list[torch.Tensor]) -> torch.Tensor | None:
    """The weights stacked by rows, as a view, when they already lie one after another in one storage."""
    first = weights[0]
    offset = first.storage_offset()
    for w in weights:
        if (
            not w.is_contiguous()
            or w.dtype != first.dtype
            or w.shape[1:] != first.shape[1:]
            or w.untyped_storage().data_ptr() != first.untyped_storage().data_ptr()
            or w.storage_offset() != offset
        ):
            return None
        offset += w.numel()
    rows = sum(w.shape[0] for w in weights)
    return first.detach().as_strided((rows, *first.shape[1:]), first.stride())


def fuse(linears: list[torch.nn.Linear]) -> torch.Tensor:
    """One weight matrix for ``linears`` (stacked by output rows), their own weights made views into it.

    No weight is held twice: when the weights already lie one after another
    (fused earlier, or a copy of a fused model) the result is a view of them;
    otherwise they are copied into one new tensor and each parameter's data
    becomes its slice, so the old separate tensors are freed.
    """
    weights = [lin.weight.detach() for lin in linears]
    fused = _adjacent(weights)
    if fused is not None:
        return fused
    with torch.inference_mode(False), torch.no_grad():
        fused = torch.cat(weights, dim=0)
        start = 0
        for lin, w in zip(linears, weights, strict=True):
            lin.weight.data = fused[start : start + w.shape[0]]
            start += w.shape[0]
    return fused


def separate(model) -> None:
    """Give every linear weight of ``model`` that is a slice of a larger tensor (fused) its own copy."""
    with torch.inference_mode(False), torch.no_grad():
        for module in model.modules():
            weight = getattr(module, "weight", None) if isinstance(module, torch.nn.Linear) else None
            if weight is not None and weight.untyped_storage().nbytes() != weight.numel() * weight.element_size():
                weight.data = weight.detach().clone()


def _layer(decoder_layer) -> _Layer:
    attn, mlp = decoder_layer.self_attn, decoder_layer.mlp
    qkv = fuse([attn.q_proj, attn.k_proj, attn.v_proj])
    gate_up = fuse([mlp.gate_proj, mlp.up_proj])
    views = (
        (attn.q_proj.weight, qkv, 0),
        (attn.v_proj.weight, qkv, attn.q_proj.weight.numel() + attn.k_proj.weight.numel()),
        (mlp.gate_proj.weight, gate_up, 0),
        (mlp.up_proj.weight, gate_up, mlp.gate_proj.weight.numel()),
    )
    return _Layer(
        decoder_layer.input_layernorm.weight.detach(),
        qkv,
        attn.o_proj.weight.detach().t(),
        decoder_layer.post_attention_layernorm.weight.detach(),
        gate_up,
        mlp.down_proj.weight.detach().t(),
        views,
    )


def _pack(weight: torch.Tensor) -> torch.Tensor:
    """``weight`` (out × in) in oneDNN's packed layout for :data:`PACK_ROWS` rows (a copy)."""
    return torch.ops.mkldnn._reorder_linear_weight(weight.contiguous(), PACK_ROWS)


def _packed_linear(x: torch.Tensor, packed: torch.Tensor, residual: torch.Tensor | None = None) -> torch.Tensor:
    """``x @ weight.T`` (plus ``residual``) with a packed weight."""
    if residual is None:
        return torch.ops.mkldnn._linear_pointwise(x, packed, None, "none", [], "")
    return torch.ops.mkldnn._linear_pointwise.binary(x, residual, packed, None, "add")


def packing_available(dtype: torch.dtype, device: torch.device) -> bool:
    """True when oneDNN's packed linear products run here for ``dtype``."""
    if device.type != "cpu" or dtype not in PACKED_MIN_ROWS or not torch.backends.mkldnn.is_available():
        return False
    try:
        weight = torch.ones(4, 8, dtype=dtype)
        out = _packed_linear(torch.ones(2, 8, dtype=dtype), _pack(weight))
    except (AttributeError, RuntimeError, NotImplementedError):
        return False
    return bool(out.shape == (2, 4) and torch.all(out == 8))


def _flash_available(dtype: torch.dtype, device: torch.device) -> bool:
    """True when torch's CPU flash-attention kernel (output and log-sum-exp) runs here."""
    if device.type != "cpu":
        return False
    try:
        q = torch.zeros(1, 1, 1, 8, dtype=dtype)
        out, lse = torch.ops.aten._scaled_dot_product_flash_attention_for_cpu(q, q, q, 0.0, False, scale=1.0)
    except (AttributeError, RuntimeError, NotImplementedError):
        return False
    return out.shape == q.shape and lse.shape == (1, 1, 1)


class LeanDecoder:
    """Runs one decoding step of every row of a :class:`SharedPassageCache` for a Llama model.

    Get it with :func:`shared_decoder` (None when the model is not supported).
    It checks before every step that the model's weights are still the ones it
    fused (a precision change with ``model.to(dtype)`` replaces them) and
    rebuilds itself when they are not.
    """

    def __init__(self, model, packed: bool = False):
        # A weak reference: the shared-decoder table is keyed by the model, and a strong one
        # from here would keep every model ever loaded alive.
        self._model = weakref.ref(model)
        self.want_packed = packed
        config = model.config
        self.heads = config.num_attention_heads
        self.kv_heads = config.num_key_value_heads
        self.head_dim = getattr(config, "head_dim", None) or config.hidden_size // self.heads
        self.hidden = config.hidden_size
        self.intermediate = config.intermediate_size
        self.eps = float(config.rms_norm_eps)
        self.scaling = self.head_dim**-0.5
        self._build()

    @property
    def model(self):
        """The model this decoder runs (it must still exist)."""
        model = self._model()
        if model is None:
            raise RuntimeError("the lean decoder's model was freed")
        return model

    def _build(self) -> None:
        inner = self.model.model
        self.layers = [_layer(layer) for layer in inner.layers]
        self.embed = inner.embed_tokens.weight.detach()
        self.norm = inner.norm.weight.detach()
        self.head_t = self.model.lm_head.weight.detach().t()
        self.dtype, self.device = self.embed.dtype, self.embed.device
        self.flash = _flash_available(self.dtype, self.device)
        self.packed = self.want_packed and packing_available(self.dtype, self.device)
        self.head_packed = _pack(self.model.lm_head.weight.detach()) if self.packed else None
        for layer in self.layers if self.packed else ():
            layer.packed = tuple(_pack(w) for w in (layer.qkv, layer.out_t.t(), layer.gate_up, layer.down_t.t()))
        half = self.head_dim // 2
        self.sign = torch.cat([-torch.ones(half), torch.ones(self.head_dim - half)]).to(self.device, self.dtype)

    def packed_bytes(self) -> int:
        """Memory held by the packed weight copies (0 when packing is off)."""
        copies = [p for layer in self.layers for p in layer.packed]
        copies += [self.head_packed] if self.head_packed is not None else []
        return sum(p.numel() * p.element_size() for p in copies)

    def current(self) -> bool:
        """True while the model's parameters are still views into this decoder's fused weights."""
        if self.model.lm_head.weight.dtype != self.dtype or self.model.model.embed_tokens.weight.device != self.device:
            return False
        for layer in self.layers:
            for param, fused, offset in layer.views:
                if param.data_ptr() != fused.data_ptr() + offset * fused.element_size():
                    return False
        return True

    def step(self, ids: torch.Tensor, cache: shared_attention.SharedPassageCache) -> torch.Tensor:
        """Feed one token per row (``ids``: (rows,) long) and return the next-token logits (rows × vocab).

        The logits are float32 on the CPU, as the plain path's.
        """
        if not self.current():
            self._build()
        x = F.embedding(ids.to(self.device), self.embed)
        packed = self.packed and ids.shape[0] >= PACKED_MIN_ROWS[self.dtype]
        position = torch.tensor([[cache.get_seq_length()]], device=self.device)
        cos, sin = self.model.model.rotary_emb(x, position_ids=position)
        cos, sin = cos.view(1, 1, 2, -1), (sin.view(-1) * self.sign).view(1, 1, 2, -1)
        for index, layer in enumerate(self.layers):
            x = self._layer_step(x, layer, cache.layer(index), cos, sin, packed)
        x = F.rms_norm(x, (self.hidden,), self.norm, self.eps)
        head = self.head_packed if packed else None
        logits = _packed_linear(x, head) if head is not None else torch.mm(x, self.head_t)
        return logits.to("cpu", torch.float32)

    def _layer_step(self, x: torch.Tensor, layer: _Layer, kv, cos, sin, packed: bool) -> torch.Tensor:
        rows, heads, kv_heads, dim = x.shape[0], self.heads, self.kv_heads, self.head_dim
        h = F.rms_norm(x, (self.hidden,), layer.norm_in, self.eps)
        qkv = _packed_linear(h, layer.packed[0]) if packed else F.linear(h, layer.qkv)
        # Rotary embedding of queries and keys together: x cos + rotate_half(x) sin,
        # with rotate_half(x) sin = flip of the halves times (-sin, +sin).
        qk = qkv[:, : (heads + kv_heads) * dim].view(rows, heads + kv_heads, 2, dim // 2)
        qk = torch.addcmul(qk * cos, qk.flip(-2), sin).view(rows, heads + kv_heads, dim)
        query, key = qk[:, :heads], qk[:, heads:]
        value = qkv[:, (heads + kv_heads) * dim :].view(rows, kv_heads, dim)
        keys, values = kv.update(key.unsqueeze(2), value.unsqueeze(2))
        out = self._attention(query, kv.prefix_keys, kv.prefix_values, keys, values)
        x = _packed_linear(out, layer.packed[1], x) if packed else torch.addmm(x, out, layer.out_t)
        h = F.rms_norm(x, (self.hidden,), layer.norm_post, self.eps)
        gate_up = _packed_linear(h, layer.packed[2]) if packed else F.linear(h, layer.gate_up)
        act = F.silu(gate_up[:, : self.intermediate]) * gate_up[:, self.intermediate :]
        return _packed_linear(act, layer.packed[3], x) if packed else torch.addmm(x, act, layer.down_t)

    def _attention(self, query, prefix_keys, prefix_values, keys, values) -> torch.Tensor:
        """Shared-prefix attention of (rows, heads, dim) queries; returns (rows, heads * dim)."""
        rows, kv_heads, dim = query.shape[0], self.kv_heads, self.head_dim
        groups = self.heads // kv_heads
        if not self.flash:
            out = shared_attention.shared_prefix_attention(
                query.unsqueeze(2), prefix_keys, prefix_values, keys, values, self.scaling
            )
            return out.reshape(rows, -1)
        flash: Any = torch.ops.aten._scaled_dot_product_flash_attention_for_cpu
        grouped = query.view(rows, kv_heads, groups, dim)
        # Passage: every row's queries of a key/value head against its one copy (Hydragen).
        stacked = grouped.transpose(0, 1).reshape(1, kv_heads, rows * groups, dim)
        out_prefix, lse_prefix = flash(stacked, prefix_keys, prefix_values, 0.0, False, scale=self.scaling)
        out_prefix = out_prefix.reshape(kv_heads, rows, groups, dim).transpose(0, 1)
        lse_prefix = lse_prefix.reshape(kv_heads, rows, groups).transpose(0, 1)
        # Each row against its own generated part.
        out_rows, lse_rows = flash(grouped, keys, values, 0.0, False, scale=self.scaling)
        # exp(lse_1 - logaddexp(lse_1, lse_2)) = sigmoid(lse_1 - lse_2): the prefix part's weight.
        weight = torch.sigmoid(lse_prefix - lse_rows).unsqueeze(-1).to(out_rows.dtype)
        return torch.lerp(out_rows, out_prefix, weight).reshape(rows, -1)
