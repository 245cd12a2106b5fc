"""The step program of pairwise contractions: each layout it chooses gives the contraction numpy's
einsum gives (numpy is the general-purpose reference; einsum's definition is the sum over repeated
indices, Einstein's summation convention), on random networks with random trees and on a circuit
against its state vector.
"""

import cotengra as ctg
import numpy as np
import pytest

from contraction.circuits.random_instances import grid_architecture, random_instance
from contraction.execution.pairwise import compile_program, copy_into
from contraction.execution.reuse import SliceContractor
from contraction.execution.statevector import state_vector
from contraction.network.builder import build_structure, tensor_arrays


def _random_network(rng, n: int):
    """``n`` tensors on random indices (each shared by two tensors or left open), sizes 2-4."""
    letters = iter("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ")
    inputs = [[] for _ in range(n)]
    output = []
    for _ in range(2 * n):
        ix = next(letters)
        a, b = rng.choice(n, size=2, replace=False)
        inputs[a].append(ix)
        if rng.random() < 0.85:
            inputs[b].append(ix)
        else:
            output.append(ix)
    sizes = {ix: int(rng.integers(2, 5)) for t in inputs for ix in t}
    arrays = [rng.standard_normal([sizes[ix] for ix in t]) + 1j * rng.standard_normal([sizes[ix] for ix in t])
              for t in inputs]
    return [tuple(t) for t in inputs], tuple(output), sizes, arrays


@pytest.mark.parametrize("seed", range(12))
def test_any_tree_contracts_like_einsum(seed):
    rng = np.random.default_rng(seed)
    inputs, output, sizes, arrays = _random_network(rng, 7)
    tree = ctg.array_contract_tree(inputs, output, sizes,
                                   optimize=ctg.RandomGreedyOptimizer(max_repeats=1, seed=seed, temperature=1.0))
    got = SliceContractor(tree, arrays).contract(0)
    eq = ",".join("".join(t) for t in inputs) + "->" + "".join(output)
    want = np.einsum(eq, *arrays)
    np.testing.assert_allclose(got, want, rtol=1e-10, atol=1e-10)


def test_grid_program_matches_the_state_vector(rng):
    c = random_instance(grid_architecture(4, 5, 12), 3, gates="haar")
    s = build_structure(c)
    # a seeded greedy tree sliced to 2^14 (a timed 1 s search's plan to 2^12 varied from 256 to 8,192
    # slices, and the test contracts every slice four times)
    tree = ctg.array_contract_tree(s.inputs, s.output, s.size_dict,
                                   optimize=ctg.RandomGreedyOptimizer(max_repeats=64, seed=3))
    tree = tree.slice(target_size=2 ** 14, allow_outer=False)
    assert tree.nslices > 1
    prog = compile_program(tree)
    # most steps use the bigger operand as it lies (the step program's design promise, no outside
    # source; the values below are checked against the state vector)
    assert sum(st.left_perm is None or st.right_perm is None for st in prog.steps) > len(prog.steps) // 2
    psi = state_vector(c)
    for k in rng.choice(2 ** 20, size=4, replace=False):
        bits = format(int(k), "020b")
        sc = SliceContractor(tree, tensor_arrays(s, c, bits))
        total = sum(complex(sc.contract(i)) for i in range(tree.nslices))
        assert abs(total - psi[int(k)]) < 1e-12


@pytest.mark.parametrize("threads", [1, 2, 3])
def test_a_copy_split_over_threads_equals_numpys(threads):
    # reference: numpy's own copy of the same transposed view
    rng = np.random.default_rng(threads)
    for shape in [(2,) * 10, (3, 5, 7, 2), (1, 1, 6, 4), (5,), (3, 4000, 2), (1, 7), (1, 1, 1)]:
        x = rng.normal(size=shape) + 1j * rng.normal(size=shape)
        moved = x.transpose(tuple(reversed(range(len(shape)))))
        dst = np.empty(moved.shape, moved.dtype)
        copy_into(dst, moved, threads, min_bytes=0)
        assert np.array_equal(dst, moved)


@pytest.mark.parametrize("threads", [1, 2])
def test_a_copy_from_far_apart_source_elements_goes_by_tiles_and_equals_numpys(threads, monkeypatch):
    # reference: numpy's own copy of the same transposed view; the destination's consecutive elements
    # come from runs shorter than a cache line lying at least a page apart in the source, so the copy
    # goes tile by tile (spied on)
    import contraction.execution.pairwise as pairwise

    tiled = []
    real = pairwise._tiled_copy
    monkeypatch.setattr(pairwise, "_tiled_copy", lambda d, s, t: (tiled.append(d.shape), real(d, s, t)))
    monkeypatch.setattr(pairwise, "TILE_ELEMENTS", 64)
    rng = np.random.default_rng(7 + threads)
    cases = [((2,) * 16, None), ((3, 5, 600, 7), (3, 1, 2, 0)), ((4, 300, 9), (1, 2, 0)),
             ((1, 513, 1, 300), (3, 2, 1, 0)),
             # runs of two contiguous elements (32 bytes) whose next axis jumps 2^10 elements (16 KiB)
             ((2,) * 16, (0, 14, 3, 1, 12, 2, 4, 13, 6, 7, 9, 11, 8, 10, 5, 15)),
             ((2,) * 12 + (1,), (0, 3, 2, 4, 5, 6, 7, 8, 9, 10, 1, 11, 12))]
    for shape, perm in cases:
        x = rng.normal(size=shape) + 1j * rng.normal(size=shape)
        if perm is None:                                  # a scramble whose last axis is the first one
            rest = list(rng.permutation(range(1, len(shape))))
            perm = tuple(rest[:5] + [rest[5]] + rest[6:] + [0])
        moved = x.transpose(perm)
        assert pairwise._scattered(moved)
        dst = np.empty(moved.shape, moved.dtype)
        copy_into(dst, moved, threads, min_bytes=0)
        assert np.array_equal(dst, moved)
    assert len(tiled) == len(cases)
    # a copy reading whole cache lines (runs of 2^5 complex elements, 512 bytes) goes plainly
    x = rng.normal(size=(2,) * 14) + 0j
    moved = x.transpose((8, 7, 6, 5, 4, 3, 2, 1, 0, 9, 10, 11, 12, 13))
    assert not pairwise._scattered(moved)
    dst = np.empty(moved.shape, moved.dtype)
    copy_into(dst, moved, threads, min_bytes=0)
    assert np.array_equal(dst, moved) and len(tiled) == len(cases)


def test_blas_threads_follows_limits_set_after_its_first_call():
    # reference: threadpoolctl's own report of the BLAS libraries loaded (a general-purpose library);
    # the libraries are found once, the count must still follow limits set later
    from threadpoolctl import threadpool_info, threadpool_limits

    from contraction.execution.pairwise import blas_threads

    def reported():
        counts = [int(d["num_threads"]) for d in threadpool_info() if d.get("user_api") == "blas"]
        return max(1, min(counts)) if counts else 1

    assert blas_threads() == reported()
    if reported() == 1 and not [d for d in threadpool_info() if d.get("user_api") == "blas"]:
        pytest.skip("no BLAS library threadpoolctl can see")
    with threadpool_limits(1):
        assert blas_threads() == reported() == 1
    with threadpool_limits(2):
        assert blas_threads() == reported()
    assert blas_threads() == reported()


@pytest.mark.parametrize("batch, m, k, n, chunk", [(0, 5, 1 << 14, 3, 16), (3, 5, 1 << 14, 3, 256),
                                                    (2, 7, 5000, 70, 16), (0, 300, 4100, 2, 64)])
def test_wide_sums_of_complex64_products_are_chunked_float32_sums_added_in_float64(batch, m, k, n, chunk):
    # references: numpy's complex128 product of the same complex64 operands (the exact value to float64
    # accuracy) and Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed.: a computed inner
    # product of c terms is within γ_c·Σ|x_i||y_i| of the exact one (§3.1, γ_c = c·u/(1 - c·u), u = 2^-24
    # for float32), with γ_{c+2} in complex arithmetic (§3.6); the float64 sum of the chunks adds a few
    # float64 roundings and the final rounding to complex64 u·|exact| per component (IEEE 754).
    # Blocks of 2^10 elements make every loop run (short last chunks, tiles and columns included).
    from contraction.execution.products import wide_sum_matmul

    rng = np.random.default_rng(11 + batch + chunk)
    lead = (batch,) if batch else ()

    def c64(*shape):
        return (rng.normal(size=shape) + 1j * rng.normal(size=shape)).astype(np.complex64)

    x, y = c64(*lead, m, k), c64(*lead, k, n)
    out = np.empty(lead + (m, n), np.complex64)
    wide_sum_matmul(x, y, out, chunk=chunk, block=1 << 10)
    exact = np.matmul(x.astype(np.complex128), y.astype(np.complex128))
    magnitude = np.matmul(np.abs(x).astype(np.float64), np.abs(y).astype(np.float64))
    u = 2.0 ** -24
    gamma = (chunk + 2) * u / (1 - (chunk + 2) * u)
    assert np.all(np.abs(out - exact) <= gamma * magnitude + 2 * u * np.abs(exact))
    # the structure itself: float32 products of consecutive chunks of the sum (numpy's complex64 product
    # of the same views), added in complex128 and rounded once; 1e-12 of the magnitudes allows for the
    # float64 additions taken in another order (a common-practice margin, far above their 2^-53 roundings
    # and far below the float32 rounding u = 6e-8 the check is about)
    parts = [np.matmul(x[..., j:j + chunk], y[..., j:j + chunk, :]) for j in range(0, k, chunk)]
    whole = sum(pt.astype(np.complex128) for pt in parts)
    assert np.all(np.abs(out - whole) <= 2 * u * np.abs(whole) + 1e-12 * magnitude)


@pytest.mark.parametrize("batch, m, k, n", [(0, 5000, 4, 4), (3, 4100, 1, 8), (1, 8192, 16, 32), (2, 4096, 8, 2)])
def test_thin_complex64_products_on_real_views_match_the_complex_product(batch, m, k, n):
    # reference: numpy's complex128 product of the same complex64 operands, and Higham, Accuracy and
    # Stability of Numerical Algorithms, 2nd ed., §3.1/§3.6: a computed complex inner product of k terms
    # is within γ_{k+2}·Σ|x_i||y_i| of the exact one (u = 2^-24 for float32). The real view makes the
    # same real products (a + ib times c + id: ac - bd, ad + bc), so the same bound holds.
    from contraction.execution.products import _real_view_pays, product, real_view_matmul

    rng = np.random.default_rng(batch * 100 + k)

    def c64(*shape):
        return (rng.normal(size=shape) + 1j * rng.normal(size=shape)).astype(np.complex64)

    lead = (batch,) if batch else ()                    # 2-d operands, or with a batch axis
    x, y = c64(*lead, m, k), c64(*lead, k, n)
    out = np.empty(lead + (m, n), np.complex64)
    assert _real_view_pays(x, y, out)                   # these shapes take the real-view path
    real_view_matmul(x, y, out)
    exact = np.matmul(x.astype(np.complex128), y.astype(np.complex128))
    magnitude = np.matmul(np.abs(x).astype(np.float64), np.abs(y).astype(np.float64))
    u = 2.0 ** -24
    gamma = (k + 2) * u / (1 - (k + 2) * u)
    assert np.all(np.abs(out - exact) <= gamma * magnitude + 2 * u * np.abs(exact))
    # through the dispatcher, and a left factor whose rows are not contiguous (a strided view) takes
    # numpy's complex product itself (bit for bit)
    again = np.empty_like(out)
    product(x, y, again)
    assert np.array_equal(again, out)
    strided = c64(*lead, m, 2 * k)[..., ::2]
    assert not _real_view_pays(strided, y, out)
    product(strided, y, again)
    assert np.array_equal(again, np.matmul(strided, y))
