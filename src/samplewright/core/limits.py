"""The audition's limits and defaults, shared by the window, the CLI and the engine.

Written down once here; the window's spin boxes, the CLI's checks and help,
the preset's ``max_new_tokens`` range and the engine's context room read them.
"""

#: The longest sample, in new tokens (a preset's ``max_new_tokens`` and an audition's budget).
MAX_NEW_TOKENS = 512
#: Samples per preset in one audition.
MAX_SAMPLES = 16
#: Presets compared in one audition (one colour each in the step view).
MAX_PRESETS = 6

#: An audition's defaults (window and CLI alike).
DEFAULT_SAMPLES = 4
DEFAULT_NEW_TOKENS = 48
DEFAULT_SEED = 1234
