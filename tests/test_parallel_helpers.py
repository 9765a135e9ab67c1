"""The thread helpers behind the forests' batches: order of results and of sums."""

import threading
import time

import numpy as np
import pytest

from splitlift._progress import threaded_sum

# Floating-point addition is not associative: with these terms a sum in another order
# (backwards, say) gives another result, so only the left-to-right order passes.
TERMS = [1e16, 1.0, -1e16, 1.0, 3.0, 1e16, -1e16, 0.5, 2.0**-30, 7.0, -3.0, 1.0]


def left_to_right(values):
    total = values[0].copy()
    for value in values[1:]:
        total += value
    return total


def make_terms(item):
    # a small array per item, each entry on its own scale
    return np.array([TERMS[item], TERMS[-1 - item] * 3.0, item * 0.1])


@pytest.mark.parametrize("n_threads", [1, 2, 4])
def test_threaded_sum_adds_in_item_order_bit_for_bit(n_threads):
    def function(item, into):
        time.sleep(0.002 * ((len(TERMS) - item) % 4))  # later items often finish first
        result = make_terms(item)
        if into is not None:
            into[...] = result
            return into
        return result

    total = threaded_sum(function, range(len(TERMS)), n_threads)
    expected = left_to_right([make_terms(item) for item in range(len(TERMS))])
    np.testing.assert_array_equal(total, expected)
    backwards = left_to_right([make_terms(item) for item in reversed(range(len(TERMS)))])
    assert not np.array_equal(backwards, expected)  # the order is what the test checks


@pytest.mark.parametrize("n_threads", [1, 3])
def test_threaded_sum_reuses_only_arrays_already_added(n_threads):
    lock = threading.Lock()
    made, handed, alive, most_alive = [], [], [0], [0]

    def function(item, into):
        with lock:
            alive[0] += 1
            most_alive[0] = max(most_alive[0], alive[0])
        if into is None:
            into = np.empty(4)
            made.append(into)
        else:
            handed.append(into)
        into.fill(item)
        time.sleep(0.001)
        with lock:
            alive[0] -= 1
        return into

    total = threaded_sum(function, range(20), n_threads)
    np.testing.assert_array_equal(total, np.full(4, float(sum(range(20)))))
    assert all(array is not total for array in handed)  # the total is never handed out
    assert len(made) <= 2 * n_threads + 1  # arrays recycled, not one per item
    assert most_alive[0] <= max(1, n_threads)


def test_threaded_sum_raises_what_a_call_raised():
    def function(item, into):
        if item == 3:
            raise ValueError("item 3 is bad")
        return np.ones(2)

    with pytest.raises(ValueError, match="item 3 is bad"):
        threaded_sum(function, range(8), 2)
