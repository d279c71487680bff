"""Helpers of the delivery-order property tests: a record cut into files, and the orders to
deliver them in."""

import itertools

from hypothesis import strategies as st


def cut_into_files(draw, rows: list, write) -> list[str]:
    """The rows cut into 3 or 4 files of consecutive rows, each made by ``write(rows)``."""
    n = len(rows)
    cuts = sorted(draw(st.sets(st.integers(1, n - 1), min_size=2, max_size=3)))
    bounds = [0, *cuts, n]
    return [write(rows[a:b]) for a, b in zip(bounds[:-1], bounds[1:])]


def delivery_orders(data, count: int) -> list[tuple[int, ...]]:
    """In-order delivery of ``count`` files first, then one or two other orders drawn."""
    orders = list(itertools.permutations(range(count)))
    return [orders[0], *data.draw(st.lists(st.sampled_from(orders[1:]), min_size=1, max_size=2, unique=True))]
