"""Exporting presets to inference engines, measuring how faithfully each engine
reproduces them, and reading the engines' own settings back as presets.

One module per target engine (``transformers_target``, ``vllm_target``,
``openai_target``), each holding the engine's stage order, the mapping of a
preset onto its parameters and back, and the engine's chain as its source
defines it (transformers: its own processors). ``fidelity`` compares a
target's chain with :func:`samplewright.shape`; ``foreign_import`` reads the
engines' files; ``exporting`` writes them. See docs/engines.md.
"""

#: Target names as the CLI and the window offer them; "samplewright" is the settings file.
TARGETS: tuple[str, ...] = ("samplewright", "transformers", "vllm", "openai-request")
ENGINE_TARGETS: tuple[str, ...] = TARGETS[1:]
