"""Sums of a record against complex exponentials, computed block by block.

A sine fit needs sums such as sum_n x[n] exp(j theta n) over a long record. Evaluating cos and
sin at every sample costs far more than the fit itself, so the record (index n = 0..N-1) is
cut into M blocks of K samples, n = m K + i. The exponential splits into a block phase and a
within-block phase, exp(j theta n) = exp(j theta m K) exp(j theta i): one (K, W) basis of the
within-block phases serves every block and every channel through matrix products, and only M
block phases are evaluated per angle. A last, shorter block takes the remainder. The same pass
can return the record's sum of squares.

Angles are in radians per sample (theta = 2 pi f dt). Pure numerics: no I/O.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class BlockLayout:
    """How a record of `samples` samples is cut: `blocks` full blocks of `block` samples and a
    remainder of `tail` samples (0 <= tail < block)."""

    samples: int
    block: int
    blocks: int
    tail: int

    @property
    def starts(self) -> np.ndarray:
        """Index of the first sample of every block, the short last block included (int64)."""
        count = self.blocks + (1 if self.tail else 0)
        return np.arange(count, dtype=np.int64) * self.block


def block_layout(samples: int) -> BlockLayout:
    """Cut `samples` into blocks of about sqrt(samples), which balances the cost of the
    within-block basis (K angles) against the block phases (M angles)."""
    if samples < 1:
        raise ValueError(f"samples must be at least 1, got {samples}")
    block = min(samples, max(16, math.isqrt(samples - 1) + 1))
    blocks, tail = divmod(samples, block)
    return BlockLayout(samples=samples, block=block, blocks=blocks, tail=tail)


# Rows of K samples per stacked matrix product, so that each product stays at or below about
# 2**17 multiply-adds. numpy's matmul hands a stack of matrices to BLAS one matrix at a time, and
# BLAS libraries (OpenBLAS among them) run products that small on the calling thread. A single
# large product would wake the BLAS thread pool, whose busy-waiting workers cost more than they
# gain for this memory-bound product, and badly so on a small machine that is doing other work
# (measured on the 2-core bench machine: 2 x 1e6 samples took 10 to 30 ms instead of ~3 ms when
# other processes were busy). Splitting the blocks over our own threads was tried too: it wins
# on an idle machine and loses badly on a busy one, so the work stays on the calling thread.
_STACK_MULTIPLY_ADDS = 2**17
# Matrix shapes the BLAS kernels handle best: stacks of a multiple of 8 rows, bases padded with
# zero columns to a multiple of 4 (measured: a (8, 1000) x (1000, 12) product takes ~20 % less
# time than (8, 1000) x (1000, 11), and 8 rows beat 10 or 11).
_ROW_MULTIPLE = 8
_COLUMN_MULTIPLE = 4


def block_products(
    rows: np.ndarray, basis: np.ndarray, with_energy: bool = False
) -> tuple[np.ndarray, np.ndarray | None]:
    """Each block of each row times the block basis, and optionally each row's sum of squares.

    rows (C, N) float64 and basis (K, W) with K = block_layout(N).block give (C, B, W) for the
    B blocks (the short last block, if any, uses the first rows of the basis) and, when
    with_energy, sum_n x[n]^2 per row (C,), else None.
    """
    channels, samples = rows.shape
    layout = block_layout(samples)
    block, width = basis.shape
    if block != layout.block:
        raise ValueError(f"basis has {block} rows, the layout of {samples} samples needs {layout.block}")
    full = layout.blocks * block
    out = np.empty((channels, layout.blocks + (1 if layout.tail else 0), width))
    energy = np.zeros(channels) if with_energy else None
    if layout.blocks:
        blocks = rows[:, :full].reshape(channels, layout.blocks, block)
        stack = _STACK_MULTIPLY_ADDS // (block * max(width, 1))
        stack = max(1, stack - stack % _ROW_MULTIPLE if stack >= _ROW_MULTIPLE else stack)
        groups = layout.blocks // stack
        grouped = groups * stack
        if groups:
            view = blocks[:, :grouped].reshape(channels, groups, stack, block)
            out[:, :grouped] = np.matmul(view, basis).reshape(channels, grouped, width)
        if grouped < layout.blocks:
            out[:, grouped : layout.blocks] = np.matmul(blocks[:, grouped:], basis)
        if energy is not None:
            as_rows = blocks[:, :, None, :]
            energy += np.matmul(as_rows, as_rows.swapaxes(-1, -2))[..., 0, 0].sum(axis=1)
    if layout.tail:
        tail = rows[:, full:]
        out[:, layout.blocks] = tail @ basis[: layout.tail]
        if energy is not None:
            energy += np.einsum("ij,ij->i", tail, tail)
    return out, energy


def sum_of_squares(rows: np.ndarray) -> np.ndarray:
    """sum_n x[n]^2 of each row of rows (C, N) float64, block by block like `block_products`."""
    return block_products(rows, np.zeros((block_layout(rows.shape[1]).block, 0)), with_energy=True)[1]


@dataclass(frozen=True)
class Projections:
    """Sums of each channel against exponentials, one row per channel.

    total: sum_n x[n], shape (C,).
    exp: sum_n x[n] exp(j k theta n) for k = 1..H, shape (C, H).
    ramp_exp: sum_n n x[n] exp(j k theta n), shape (C, H), or None when not asked for.
    energy: sum_n x[n]^2, shape (C,), or None when not asked for.
    """

    total: np.ndarray
    exp: np.ndarray
    ramp_exp: np.ndarray | None
    energy: np.ndarray | None


def harmonic_table(positions: np.ndarray, angle_rad: float, harmonics: int) -> np.ndarray:
    """exp(j k theta p) for every position p (samples) and k = 1..harmonics: shape (P, harmonics).

    One complex exponential per position; the harmonics follow by repeated multiplication
    (relative error about k x 1e-16, the same order as rounding k theta p itself)."""
    first = np.exp(1j * angle_rad * np.asarray(positions, dtype=np.float64))
    table = np.empty((first.size, harmonics), dtype=np.complex128)
    table[:, 0] = first
    for k in range(1, harmonics):
        np.multiply(table[:, k - 1], first, out=table[:, k])
    return table


def project(
    rows: np.ndarray, angle_rad: float, harmonics: int = 1, ramp: bool = False, with_energy: bool = False
) -> Projections:
    """Project every row of `rows` (shape (C, N), float64) onto exp(j k theta n) for
    k = 1..harmonics, theta = angle_rad (rad/sample); also onto n exp(j k theta n) when `ramp`
    is set, and sum x^2 when `with_energy` is set (in the same pass over the record)."""
    channels, samples = rows.shape
    layout = block_layout(samples)
    count = harmonics
    within = np.arange(layout.block, dtype=np.float64)
    local_waves = harmonic_table(within, angle_rad, count)
    width = 1 + 2 * count + (2 * count if ramp else 0)
    basis = np.zeros((layout.block, -(-width // _COLUMN_MULTIPLE) * _COLUMN_MULTIPLE))
    basis[:, 0] = 1.0
    basis[:, 1 : 1 + count] = local_waves.real
    basis[:, 1 + count : 1 + 2 * count] = local_waves.imag
    if ramp:
        basis[:, 1 + 2 * count : 1 + 3 * count] = within[:, None] * local_waves.real
        basis[:, 1 + 3 * count : 1 + 4 * count] = within[:, None] * local_waves.imag
    starts = layout.starts.astype(np.float64)
    rotation = harmonic_table(starts, angle_rad, count)
    with np.errstate(invalid="ignore", over="ignore"):  # non-finite samples propagate as nan
        per_block, energy = block_products(rows, basis, with_energy)
        total = per_block[:, :, 0].sum(axis=1)
        local = per_block[:, :, 1 : 1 + count] + 1j * per_block[:, :, 1 + count : 1 + 2 * count]
        exp = np.einsum("cml,ml->cl", local, rotation)
        ramp_exp = None
        if ramp:
            ramp_cos = per_block[:, :, 1 + 2 * count : 1 + 3 * count]
            ramp_sin = per_block[:, :, 1 + 3 * count : 1 + 4 * count]
            local_ramp = ramp_cos + 1j * ramp_sin
            shifted = local_ramp + starts[None, :, None] * local
            ramp_exp = np.einsum("cml,ml->cl", shifted, rotation)
    return Projections(total=total, exp=exp, ramp_exp=ramp_exp, energy=energy)


def power_sums(samples: int, angles_rad: np.ndarray, power: int) -> np.ndarray:
    """sum_{n=0}^{samples-1} n**power exp(j theta n) for each angle (rad/sample); power 0, 1 or 2.

    Power 0 is the closed form of `dirichlet_sums`. Powers 1 and 2 are evaluated block by block
    like `project`, with (m K + i)**power expanded binomially: O(sqrt(samples)) per angle.
    """
    if power not in (0, 1, 2):
        raise ValueError(f"power must be 0, 1 or 2, got {power}")
    if power == 0:
        return dirichlet_sums(samples, angles_rad)
    layout = block_layout(samples)
    angles = np.asarray(angles_rad, dtype=np.float64).reshape(-1)
    within = np.arange(layout.block, dtype=np.float64)
    waves = np.exp(1j * np.outer(within, angles))
    weights = [np.ones_like(within), within, within * within][: power + 1]
    starts = layout.starts.astype(np.float64)
    # local[r][m, l] = sum_{i < length_m} i**r exp(j theta_l i)
    local = []
    for weight in weights:
        terms = weight[:, None] * waves
        full_sum = terms.sum(axis=0)
        per_block = np.broadcast_to(full_sum, (starts.size, angles.size)).copy()
        if layout.tail:
            per_block[-1] = terms[: layout.tail].sum(axis=0)
        local.append(per_block)
    binomial = {0: (1,), 1: (1, 1), 2: (1, 2, 1)}[power]
    combined = np.zeros((starts.size, angles.size), dtype=np.complex128)
    for r, coefficient in enumerate(binomial):
        combined += coefficient * (starts ** (power - r))[:, None] * local[r]
    rotation = np.exp(1j * np.outer(starts, angles))
    return (combined * rotation).sum(axis=0)


def dirichlet_sums(samples: int, angles_rad: np.ndarray) -> np.ndarray:
    """sum_{n=0}^{samples-1} exp(j theta n) for each angle (rad/sample), in closed form:
    exp(j theta (N-1)/2) sin(N theta/2) / sin(theta/2), and N where theta is a multiple of 2 pi.
    The angle is first reduced to [-pi, pi] (the sum has period 2 pi)."""
    angles = np.asarray(angles_rad, dtype=np.float64).reshape(-1)
    half = 0.5 * (angles - 2.0 * np.pi * np.round(angles / (2.0 * np.pi)))
    denominator = np.sin(half)
    safe = np.where(denominator == 0.0, 1.0, denominator)
    ratio = np.where(denominator == 0.0, float(samples), np.sin(samples * half) / safe)
    return np.exp(1j * half * (samples - 1)) * ratio
