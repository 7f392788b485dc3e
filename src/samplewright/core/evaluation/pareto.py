"""The Pareto front: the points no other point beats on both axes.

A point a is dominated when some point b is at least as good on both axes and
strictly better on one (Pareto optimality; common practice in multi-objective
comparison). Points with an undefined coordinate are never on the front.
"""

from __future__ import annotations

from collections.abc import Sequence


def pareto_front(
    points: Sequence[tuple[float | None, float | None]], higher_is_better: tuple[bool, bool] = (True, True)
) -> list[bool]:
    """For each point, whether it is on the Pareto front.

    Sort by the first axis (best first) and sweep: within a run of equal first
    coordinates only the best second coordinate can survive, and it survives
    when it beats every second coordinate of a strictly better first one.
    O(n log n).

    Args:
        points: (x, y) per item; None where undefined.
        higher_is_better: per axis, whether a larger value is better.

    Returns:
        One bool per point, in the order given.
    """
    sign = (1.0 if higher_is_better[0] else -1.0, 1.0 if higher_is_better[1] else -1.0)
    live = [
        (sign[0] * float(x), sign[1] * float(y), i)
        for i, (x, y) in enumerate(points)
        if x is not None and y is not None
    ]
    live.sort(key=lambda p: (-p[0], -p[1]))
    front = [False] * len(points)
    best_y = float("-inf")
    start = 0
    while start < len(live):
        end = start
        while end < len(live) and live[end][0] == live[start][0]:
            end += 1
        top = live[start][1]  # the best y among this run of equal x
        if top > best_y:
            for _, y, i in live[start:end]:
                front[i] = y == top
        best_y = max(best_y, top)
        start = end
    return front
