"""LU solves of many matrices that share one sparsity pattern, vectorised across the batch.

Circuit matrices are sparse, and every sample and frequency of one netlist has the same
pattern; only the numbers differ. The elimination is therefore planned once on the pattern
(which entries fill in, which updates happen, in which order) and then run as a few dozen
numpy operations, each over the whole batch at once. The order is fixed in advance: columns
by reverse Cuthill-McKee on the symmetrised pattern (scipy.sparse.csgraph, a common
bandwidth-reducing ordering), rows by partial pivoting of a representative matrix. A fixed
pivot sequence is what circuit simulators reuse across an AC sweep too; as they do, each
pivot is checked during the elimination (threshold partial pivoting: a pivot smaller than
THRESHOLD times the largest entry below it in its column fails the check) and the matrices
where a check fails are solved again, one by one, by numpy.linalg.solve with full partial
pivoting, so the fixed order only ever costs speed, never accuracy.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import reverse_cuthill_mckee

THRESHOLD = 0.01  # a pivot at least this fraction of the largest entry below it (common sparse-solver choice)


@dataclass(frozen=True)
class _Step:
    pivot: int  # slot of the pivot entry
    below: np.ndarray  # slots of the column entries under the pivot (multipliers after the step)
    below_rows: np.ndarray  # their rows (elimination order)
    targets: np.ndarray  # slots updated: target -= multiplier * source, shape (len(below), len(right))
    right: np.ndarray  # slots of the pivot row right of the pivot
    right_cols: np.ndarray  # their columns (elimination order)


class Elimination:
    """A planned LU elimination for matrices with the nonzero entries (rows[i], cols[i]).

    representative: one matrix of the family (dense n x n), used to choose the row order.
    Entries are later given in the order of (rows, cols); the right-hand side and the solution
    are in the original row and column numbering.
    """

    def __init__(self, n: int, rows: np.ndarray, cols: np.ndarray, representative: np.ndarray) -> None:
        self.n = n
        rows = np.asarray(rows, dtype=int)
        cols = np.asarray(cols, dtype=int)
        self._pattern = (rows, cols)
        pattern = np.zeros((n, n), dtype=bool)
        pattern[rows, cols] = True
        symmetric = csr_matrix((pattern | pattern.T).astype(np.int8))
        column_order = np.asarray(reverse_cuthill_mckee(symmetric, symmetric_mode=True), dtype=int)
        permuted = representative[np.ix_(column_order, column_order)]
        p, _, _ = scipy.linalg.lu(permuted)
        row_order = column_order[np.argmax(p, axis=0)]
        self.row_order = row_order  # elimination row r is original row row_order[r]
        self.column_order = column_order  # elimination column c is original column column_order[c]
        row_position = np.empty(n, dtype=int)
        row_position[row_order] = np.arange(n)
        col_position = np.empty(n, dtype=int)
        col_position[column_order] = np.arange(n)
        work = np.zeros((n, n), dtype=bool)
        work[row_position[rows], col_position[cols]] = True
        slot = -np.ones((n, n), dtype=int)
        slot[row_position[rows], col_position[cols]] = np.arange(rows.size)
        next_slot = rows.size
        steps: list[_Step] = []
        for k in range(n):
            if not work[k, k]:
                work[k, k] = True
                slot[k, k] = next_slot
                next_slot += 1
            below_rows = np.flatnonzero(work[k + 1:, k]) + k + 1
            right_cols = np.flatnonzero(work[k, k + 1:]) + k + 1
            for i in below_rows:
                for j in right_cols:
                    if not work[i, j]:
                        work[i, j] = True
                        slot[i, j] = next_slot
                        next_slot += 1
            targets = slot[np.ix_(below_rows, right_cols)] if below_rows.size and right_cols.size else np.zeros((0, 0), int)
            steps.append(_Step(int(slot[k, k]), slot[below_rows, k], below_rows, targets, slot[k, right_cols], right_cols))
        self.entries = rows.size
        self.slots = next_slot

        self.steps = steps

    def solve(self, entries: np.ndarray, rhs: np.ndarray) -> np.ndarray:
        """x with A x = rhs for every matrix of the batch: entries (nnz, B) in (rows, cols) order,
        rhs (n, B); returns (n, B). Matrices whose fixed pivots fail the threshold check are solved
        again with numpy.linalg.solve; singular ones give NaN."""
        batch = entries.shape[1]
        a = np.zeros((self.slots, batch), dtype=complex)
        a[: self.entries] = entries
        b = rhs[self.row_order].astype(complex)
        failed = np.zeros(batch, dtype=bool)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            for k, step in enumerate(self.steps):
                pivot = a[step.pivot]
                if step.below.size:
                    largest = np.abs(a[step.below]).max(axis=0)
                    failed |= ~(np.abs(pivot) >= THRESHOLD * largest)
                    multipliers = a[step.below] / pivot
                    a[step.below] = multipliers
                    if step.right.size:
                        a[step.targets.ravel()] -= (multipliers[:, None, :] * a[step.right][None, :, :]).reshape(-1, batch)
                    b[step.below_rows] -= multipliers * b[k][None, :]
                elif not np.all(np.isfinite(pivot)):
                    failed |= ~np.isfinite(pivot)
            x = np.empty_like(b)
            for k in range(self.n - 1, -1, -1):
                step = self.steps[k]
                total = b[k]
                if step.right.size:
                    total = total - np.einsum("ib,ib->b", a[step.right], x[step.right_cols])
                x[k] = total / a[step.pivot]
        failed |= ~np.all(np.isfinite(x), axis=0)
        out = np.empty_like(x)
        out[self.column_order] = x
        if np.any(failed):
            out[:, failed] = self._dense(entries[:, failed], rhs[:, failed])
        return out

    def _dense(self, entries: np.ndarray, rhs: np.ndarray) -> np.ndarray:
        """The batch solved with numpy's LU with full partial pivoting; one by one when a matrix is
        singular (NaN for it)."""
        matrices = np.zeros((entries.shape[1], self.n, self.n), dtype=complex)
        rows, cols = self._pattern
        np.add.at(matrices, (slice(None), rows, cols), entries.T)
        try:
            return np.linalg.solve(matrices, rhs.T[:, :, None])[:, :, 0].T
        except np.linalg.LinAlgError:
            pass
        out = np.full((self.n, entries.shape[1]), np.nan + 0j)
        for i in range(entries.shape[1]):
            try:
                out[:, i] = np.linalg.solve(matrices[i], rhs[:, i])
            except np.linalg.LinAlgError:
                continue
        return out
