"""Reused count-view buffers (rlrates.buffers): memory comes back only when nothing can read it.

The property under test is the one the estimators rely on: a count view they
hold never changes, whatever is drawn after it; and a reused buffer carries no
counts of an earlier draw into a later one (common practice for buffer pools).
"""

from __future__ import annotations

import gc

import numpy as np
import pytest

import rlrates
from rlrates.buffers import ReusedBuffers
from rlrates.sampling import block_seed, draw_block, mdp_kernel


def test_a_buffer_is_reused_only_after_every_view_of_it_is_gone() -> None:
    pool = ReusedBuffers()
    layout = object()
    first, view = pool.take(12, layout)
    rows = list(view.reshape(3, 4))  # views of the view keep the buffer too
    del view
    second, _ = pool.take(12, layout)
    assert second is not first  # a row view is still alive
    del rows, _
    gc.collect()
    third, _ = pool.take(12, layout)
    assert third is first or third is second


def test_a_reused_buffer_is_zero_wherever_the_new_writer_does_not_write() -> None:
    pool = ReusedBuffers()
    mine, other = object(), object()
    flat, view = pool.take(8, mine)
    flat[[1, 5]] = 7
    del view
    again, view = pool.take(8, mine)  # the same layout: the caller overwrites positions 1 and 5 itself
    assert again is flat
    del view
    elsewhere, view = pool.take(8, other)  # another layout: zeroed
    assert elsewhere is flat and not elsewhere.any()


def test_views_are_read_only_for_good() -> None:
    flat, view = ReusedBuffers().take(4, None)
    with pytest.raises(ValueError):
        view.setflags(write=True)
    with pytest.raises(ValueError):
        view[0] = 1


def test_the_pool_keeps_at_most_its_limit() -> None:
    pool = ReusedBuffers(keep=2, limit=1000)
    taken = [pool.take(10, None) for _ in range(4)]
    assert len(pool._entries) == 2  # the others were handed out but not kept
    big, _ = pool.take(200, None)  # 1600 bytes: over the limit, never kept
    assert all(entry.buffer is not big for entry in pool._entries)
    del taken


def test_count_views_an_estimator_keeps_never_change_under_later_draws() -> None:
    # An estimator may keep batch.counts (a cache of past batches). Later blocks are drawn into
    # reused memory only when no view of it is alive, so every kept view still equals a fresh
    # scatter of its own draw, after many more blocks of the same shape.
    mdp = rlrates.garnet(12, 3, 4, seed=2)
    kernel = mdp_kernel(mdp)
    kept = [batch.counts for batch in draw_block(kernel, 64, 5, block_seed(0, "kept", 0.9, 64, 0, 5))]
    expected = [np.array(view) for view in kept]
    for k in range(20):
        for batch in draw_block(kernel, 64, 5, block_seed(k, "later", 0.9, 64, 0, 5)):
            assert int(batch.counts.sum()) == 64 * 12 * 3
    for view, copy in zip(kept, expected):
        np.testing.assert_array_equal(view, copy)


def test_counts_read_from_reused_memory_equal_the_scatter_of_the_draw() -> None:
    # dense views built into reused buffers hold exactly the support counts drawn, whatever came
    # before; the reference scatter is numpy's np.add.at into fresh zeros
    mdp = rlrates.garnet(10, 2, 3, seed=5)
    kernel = mdp_kernel(mdp)
    for k in range(6):
        batches = draw_block(kernel, 32, 4, block_seed(k, "reuse", 0.5, 32, 0, 4))
        drawn = batches[0]._block.drawn
        fresh = np.zeros((4, 20, 10), dtype=np.int64)
        np.add.at(fresh, (np.arange(4)[:, None, None], np.arange(20)[None, :, None], kernel.support[None]), drawn)
        for r, batch in enumerate(batches):
            np.testing.assert_array_equal(batch.counts, fresh[r].reshape(10, 2, 10))


def test_a_sparse_kernel_has_no_dense_view() -> None:
    kernel = mdp_kernel(rlrates.gridworld(3, 3, walls=(), sparse=True))
    with pytest.raises(ValueError, match="needs a dense kernel"):
        kernel.dense_view(np.zeros((kernel.support.shape[0], kernel.support.shape[1]), dtype=np.int64))
