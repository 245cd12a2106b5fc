"""The matrix products of a contraction step: ``out[...] = x @ y`` on operands laid out as
(batch, rows, inner) @ (batch, inner, columns) by :mod:`contraction.execution.pairwise`.

:func:`product` picks how: complex64 sums of many terms in chunks (:func:`wide_sum_matmul`, for
accuracy), thin complex64 products as one real product on the operands' real views
(:func:`real_view_matmul`, for speed), the rest as numpy's own product.
"""

from __future__ import annotations

import numpy as np

#: complex64 products summing at least this many terms per output element are summed in chunks
#: (:func:`wide_sum_matmul`)
WIDE_SUM_TERMS = 1 << 12

#: terms of one float32 partial sum in :func:`wide_sum_matmul`: the longest sums the other steps of a
#: slice make in float32 (their inner dimensions run to 2^8-2^10), so the long sum adds no more error
#: per term than they do
WIDE_SUM_CHUNK = 1 << 8

#: elements of the float32 partial sums :func:`wide_sum_matmul` holds at a time (8 MiB)
WIDE_SUM_BLOCK_ELEMENTS = 1 << 20


def wide_sum_matmul(x: np.ndarray, y: np.ndarray, out: np.ndarray, chunk: int = WIDE_SUM_CHUNK,
                    block: int = WIDE_SUM_BLOCK_ELEMENTS) -> np.ndarray:
    """``out[...] = x @ y`` for complex64 operands ((rows, inner) @ (inner, columns), or with a leading
    batch axis on all three), each sum made of float32 partial sums of ``chunk`` terms added in
    complex128 and rounded once.

    A float32 product accumulates its sums in float32, and the error bound of a sum of K terms grows
    with K (K·u·Σ|terms| to first order, Higham, Accuracy and Stability of Numerical Algorithms, 2nd
    ed., §3.1), while a random circuit's amplitude is far smaller than Σ|terms|; a slice's last steps
    sum 2^12-2^26 terms. Partial sums of ``chunk`` terms bound each term's share of the error as a step
    summing ``chunk`` terms does. The partial sums are float32 products of stacked (rows, chunk) @
    (chunk, columns) views of the operands (no copies), so the work runs at the complex64 product rate;
    summing everything in complex128 instead took 2.4x the float32 product's time on a (4096, 4096) @
    (4096, 128) step (0.446 s against 0.183 s, measured, one thread)."""
    x3 = x if x.ndim == 3 else x[None]
    y3 = y if y.ndim == 3 else y[None]
    o3 = out if out.ndim == 3 else out[None]
    nb_all, m_all, k_all = x3.shape
    n_all = y3.shape[2]
    chunk = max(1, min(chunk, k_all))
    kk = k_all - k_all % chunk                         # whole chunks; the rest is one shorter sum
    # tiles of the output: up to 256 columns and as many rows as leave room for one chunk's partial
    # sums; the partial sums of ``q`` chunks of one tile are made by one stacked product
    nc = min(n_all, 256)
    rm = min(m_all, max(1, block // nc))
    q = max(1, min(kk // chunk, block // (rm * nc)))
    part = np.empty((q, rm, nc), np.complex64)
    acc = np.empty((rm, nc), np.complex128)
    for b in range(nb_all):
        for m0 in range(0, m_all, rm):
            m1 = min(m0 + rm, m_all)
            for n0 in range(0, n_all, nc):
                n1 = min(n0 + nc, n_all)
                a = acc[:m1 - m0, :n1 - n0]
                a[...] = 0
                for k0 in range(0, kk, q * chunk):
                    k1 = min(k0 + q * chunk, kk)
                    c = (k1 - k0) // chunk
                    xs = x3[b, m0:m1, k0:k1].reshape(m1 - m0, c, chunk).transpose(1, 0, 2)
                    ys = y3[b, k0:k1, n0:n1].reshape(c, chunk, n1 - n0)
                    p = part[:c, :m1 - m0, :n1 - n0]
                    np.matmul(xs, ys, out=p)
                    a += p.sum(axis=0, dtype=np.complex128)
                if kk < k_all:
                    a += np.matmul(x3[b, m0:m1, kk:], y3[b, kk:, n0:n1])
                o3[b, m0:m1, n0:n1] = a
    return out


#: thin complex64 products — a large left factor times a small right one with at most this many rows
#: (inner terms) and between the two column bounds below — run as one real product on real views
#: (:func:`real_view_matmul`); the bounds are where it was faster (measured, see the function)
REAL_VIEW_MAX_INNER = 16
REAL_VIEW_MIN_COLUMNS = 2
REAL_VIEW_MAX_COLUMNS = 32
#: left factors with fewer rows than this are multiplied as they are: the real right factor's set-up
#: (a few small numpy operations, microseconds) is worth it only on products that take longer
#: (common practice; the bound itself was not measured)
REAL_VIEW_MIN_ROWS = 1 << 12
#: the dtypes whose thin products go on real views
REAL_VIEW_DTYPES = (np.dtype(np.complex64),)


def real_view_matmul(x: np.ndarray, y: np.ndarray, out: np.ndarray) -> np.ndarray:
    """``out[...] = x @ y`` (complex, (rows, inner) @ (inner, columns) or with leading batch axes; ``x``'s and
    ``out``'s last axes contiguous) as one real product:
    ``x`` read as real numbers (its rows interleave real and imaginary parts) times the real
    (2 inner, 2 columns) matrix (per batch) with blocks [[a, b], [-b, a]] for each element a + ib of ``y``,
    written to ``out`` read as real numbers. The products and sums are those of the complex product
    (real parts x_r a - x_i b, imaginary parts x_r b + x_i a). BLAS's complex products are slow on thin
    shapes: one thread, 2^20 x K @ K x N complex64 ran 1.3-3.7x faster this way for K <= 16 and
    2 <= N <= 32, slower for N = 1 (measured with another job on the cores; 1.32x on whole 2^20 and 2^24
    slices in alternating runs)."""
    real = x.real.dtype
    k, n = y.shape[-2:]
    yr = np.empty(y.shape[:-2] + (2 * k, 2 * n), real)
    yr[..., 0::2, 0::2] = y.real
    yr[..., 1::2, 0::2] = -y.imag
    yr[..., 0::2, 1::2] = y.imag
    yr[..., 1::2, 1::2] = y.real
    np.matmul(x.view(real), yr, out=out.view(real))
    return out


def _real_view_pays(x: np.ndarray, y: np.ndarray, out: np.ndarray) -> bool:
    k, n = y.shape[-2:]
    return (x.dtype in REAL_VIEW_DTYPES and k <= REAL_VIEW_MAX_INNER and REAL_VIEW_MIN_COLUMNS <= n <= REAL_VIEW_MAX_COLUMNS
            and x.shape[-2] >= REAL_VIEW_MIN_ROWS and x.strides[-1] == x.itemsize
            and out.strides[-1] == out.itemsize)


def product(x: np.ndarray, y: np.ndarray, out: np.ndarray) -> np.ndarray:
    """``out[...] = x @ y`` for operands of one dtype shaped (batch, rows, inner) and (batch, inner,
    columns): complex64 sums of :data:`WIDE_SUM_TERMS` terms or more in chunks, thin complex64
    products on real views, the rest by numpy."""
    if x.dtype == np.complex64 and x.shape[-1] >= WIDE_SUM_TERMS:
        return wide_sum_matmul(x, y, out)            # long float32 sums lose accuracy: summed in chunks
    if _real_view_pays(x, y, out):
        return real_view_matmul(x, y, out)
    return np.matmul(x, y, out=out)
