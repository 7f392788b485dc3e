"""What the benchmark scripts share: the presets they time, the machine line printed
with every figure, and the side-by-side report of two timed sides."""

from __future__ import annotations

import os

#: The four presets both benchmarks time.
PRESETS = [
    {"name": "steady", "temperature": 0.7, "top_p": 0.9},
    {"name": "top-k 40", "temperature": 1.0, "top_k": 40},
    {"name": "min-p", "temperature": 1.0, "min_p": 0.05},
    {"name": "varied", "temperature": 1.1, "top_p": 0.95, "repetition_penalty": 1.1},
]


def machine_line() -> str:
    """CPU model, cores and the load average (the machine may be shared)."""
    from samplewright.core.engine.precision import cpu_name

    load = ", ".join(f"{x:.2f}" for x in os.getloadavg())
    return f"CPU: {cpu_name()} ({os.cpu_count()} cores), load average {load}"


def report_sides(first: tuple[str, list], second: tuple[str, list], ratio_label: str) -> float:
    """Print each side's best rate (tokens/s over its runs of (tokens, seconds)) and their ratio;
    returns the first side's best rate."""
    (first_label, first_runs), (second_label, second_runs) = first, second
    first_rate = max(n / s for n, s in first_runs)
    second_rate = max(n / s for n, s in second_runs)
    print(f"{first_label}: {first_rate:.1f} tokens/s")
    print(f"{second_label}: {second_rate:.1f} tokens/s")
    print(f"{ratio_label}: {first_rate / second_rate:.2f}")
    return first_rate
