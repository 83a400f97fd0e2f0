"""Following levels through a sweep by the overlap of their eigenspaces.

A sweep changes only the geometry, so successive steps share the mesh
topology and number the degrees of freedom the same way: a nodal vector of
step a is a function on step b's surface too.  Each level keeps its identity
from step a to step b by how much of its state lies in each multiplet of b.

Method (one transition a -> b)
------------------------------
0. Tracks that have shared one multiplet at every step since they began (a
   *cohort*: e.g. the whole 7-fold l = 3 level of a sphere at the first step)
   have no individual identity yet, only a common subspace.  Inside it each
   cohort's basis is turned to the zeroth-order states of degenerate
   perturbation theory for step b: the eigenvectors of b's operator
   restricted to the cohort's span, A = C^T diag(lam_b) C + lam_top (I - C^T C)
   with C = U_b^T M_b T_cohort (the part outside b's window counted at the top
   of it).  A cohort splits when its tracks enter different multiplets.
1. The tracked states T_a (N, n_a) of step a are made orthonormal in the mass
   matrix M_b of step b by the symmetric (Loewdin) choice
   T_a (T_a^T M_b T_a)^{-1/2}, which moves each column least.  M_b is the
   consistent mass matrix, reassembled from step b's case: a row-sum lumped
   mass is not an option for the degree-2 elements we use, whose vertex rows
   sum to zero.
2. O = U_b^T M_b T_a (n_b, n_a) holds the cosines between b's eigenvectors
   and a's states; w[h, k] = sum_{j in h} O[j, k]^2 is the squared cosine of
   the angle between state k and the multiplet subspace h of step b.  For a
   set S of states sent into h, sum_{k in S} w[h, k] is the sum of squared
   cosines of the principal angles between span(T_S) and span(U_h)
   (Golub and Van Loan, *Matrix Computations*, 4th ed., sect. 6.4.3 -
   recalled from memory).
3. ``scipy.optimize.linear_sum_assignment`` sends the states into the
   multiplets, multiplet h offering |h| identical slots, maximising the total
   squared cosine: levels pass through one another when they belong to
   different symmetry classes (their overlap is ~0) whatever their order in
   energy.
4. Inside each multiplet the eigenvectors of a degenerate level are
   arbitrary, so the states carried forward are U_h R with R the orthogonal
   polar factor of O[h, S] (the rotation of the multiplet's basis closest to
   the incoming states).  This is what carries identity through an exact
   degeneracy, e.g. the sphere's 5-fold l = 2 level in the middle of a
   sweep from oblate to prolate.  Each state is then given the eigenvector
   (mode index, energy) of its multiplet that it weighs most on.
5. A state whose best multiplet holds less than ``min_overlap`` of it ends
   its track (it left the computed window, or the step was too large); an
   eigenvector with no incoming state starts a new track whose parent l is
   its own step's label.

When two steps have different numbers of degrees of freedom overlaps cannot
be formed; the levels are then matched in energy order and a
:class:`TrackingWarning` says so.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy.linalg import eigh, svd
from scipy.optimize import linear_sum_assignment

__all__ = ["StepModes", "LevelTracker", "TrackingWarning"]


class TrackingWarning(UserWarning):
    """Levels could not be followed by overlaps between two steps."""


@dataclass(frozen=True, eq=False)
class StepModes:
    """What the tracker needs of one solved step.

    Attributes
    ----------
    vectors
        (N, n) nodal eigenvectors, M-orthonormal on this step's surface.
    eigenvalues
        (n,) their eigenvalues, ascending.
    groups
        Multiplets: lists of mode indices (0..n-1), each mode in exactly one.
    labels
        Parent degree l of each mode (None where unlabelled).
    M
        (N, N) consistent mass matrix of this step (sparse).
    """

    vectors: np.ndarray
    eigenvalues: np.ndarray
    groups: list
    labels: list
    M: object


@dataclass
class LevelTracker:
    """Feed steps in order with :meth:`add`; read ``assignments`` afterwards.

    ``assignments[s]`` lists, for step s, one ``(mode, track, overlap)``
    triple per mode, overlap being the squared cosine w of step 3 above (NaN
    where a track starts).  ``parent_l[track]`` is the track's parent degree.
    """

    min_overlap: float = 0.5
    assignments: list = field(default_factory=list)
    parent_l: list = field(default_factory=list)
    first_step: list = field(default_factory=list)
    _states: np.ndarray | None = None
    _ids: list = field(default_factory=list)
    _cohorts: list = field(default_factory=list)

    def states(self) -> tuple[list, np.ndarray | None]:
        """The tracks' states at the last step added: (track ids, (N, k) M-orthonormal columns).

        Inside a degenerate multiplet a state is the combination of the multiplet's eigenvectors
        closest to the track's previous state (step 4 above), so it changes smoothly from step to step.
        """
        return list(self._ids), self._states

    def _new_track(self, label, step) -> int:
        self.parent_l.append(label)
        self.first_step.append(step)
        return len(self.parent_l) - 1

    def add(self, step: StepModes) -> list:
        """Assign the modes of the next step to tracks; returns that step's triples."""
        s = len(self.assignments)
        U = _modes(step.vectors)
        n = U.shape[1]
        group_of = np.zeros(n, dtype=int)
        for h, g in enumerate(step.groups):
            group_of[list(g)] = h
        if self._states is None or self._states.shape[0] != U.shape[0]:
            if self._states is not None:
                warnings.warn(f"step {s} has {U.shape[0]} degrees of freedom, step {s - 1} had "
                              f"{self._states.shape[0]}: levels matched in energy order, not by overlap",
                              TrackingWarning, stacklevel=2)
            out = []
            for j in range(n):
                track = self._ids[j] if j < len(self._ids) else self._new_track(step.labels[j], s)
                out.append((j, track, float("nan")))
            states, ids, cohorts = U, [t for _, t, _ in out], [("step", s, h) for h in group_of]
        else:
            out, states, ids, cohorts = self._follow(step, s)
        self.assignments.append(sorted(out))
        self._states, self._ids, self._cohorts = states, ids, cohorts
        return self.assignments[-1]

    @staticmethod
    def _zeroth_order(UtMT, lam, cohorts):
        """The rotation (n_a, n_a) turning each cohort's basis to step b's zeroth-order states (step 0).

        ``UtMT`` is U_b^T M_b T: only these overlaps enter.
        """
        X = np.eye(UtMT.shape[1])
        top = float(np.max(lam)) if len(lam) else 0.0
        for label in set(cohorts):
            ks = [k for k, c in enumerate(cohorts) if c == label]
            if len(ks) < 2:
                continue
            C = UtMT[:, ks]
            A = C.conj().T @ (lam[:, None] * C) + top * (np.eye(len(ks)) - C.conj().T @ C)
            _, V = eigh(0.5 * (A + A.conj().T))
            X = X.astype(np.result_type(X, V))
            X[np.ix_(ks, ks)] = V
        return X

    def _follow(self, step: StepModes, s: int):
        U, M = _modes(step.vectors), step.M
        lam = np.asarray(step.eigenvalues, dtype=float)
        # every later basis of step a's states is T X for a small X, so one product with M serves:
        # M (T X) = (M T) X, and U^T M (T X) = (U^T M T) X
        T = self._states
        MT = np.asarray(M @ T)
        # Hermitian forms throughout: complex modes (magnetic fields) overlap in the complex M inner product
        G = T.conj().T @ MT
        d, V = eigh(0.5 * (G + G.conj().T))
        X = (V * (1.0 / np.sqrt(np.maximum(d, 1e-300)))) @ V.conj().T  # Loewdin: T X is M-orthonormal
        UtMT = (U.conj().T @ MT) @ X
        Z = self._zeroth_order(UtMT, lam, self._cohorts)
        O = UtMT @ Z  # (n_b, n_a) = U^T M T_a with T_a = T X Z
        groups = [np.asarray(g, dtype=int) for g in step.groups]
        w = np.array([np.sum(np.abs(O[g]) ** 2, axis=0) for g in groups])  # (groups, n_a)
        slot_group = np.concatenate([np.full(len(g), h) for h, g in enumerate(groups)])
        rows, cols = linear_sum_assignment(-w[slot_group].T)  # states x slots
        sent = {h: [] for h in range(len(groups))}
        for k, slot in zip(rows, cols):
            h = slot_group[slot]
            if w[h, k] >= self.min_overlap:
                sent[h].append(k)
        out, new_states, new_ids, new_cohorts = [], [], [], []
        for h, g in enumerate(groups):
            ks = sent[h]
            R = np.zeros((len(g), 0))
            if ks:
                W, _, Vt = svd(O[np.ix_(g, ks)], full_matrices=False)
                R = W @ Vt  # (|h|, |ks|), orthonormal columns: the polar factor
            if len(ks) < len(g):  # eigenvectors nobody arrived in: complete the basis
                P = np.eye(len(g)) - R @ R.conj().T
                Wc, _, _ = svd(P)
                R = np.hstack([R, Wc[:, :len(g) - len(ks)]])
            owners = list(ks) + [None] * (len(g) - len(ks))
            # each state takes the eigenvector it weighs most on (ties inside a level are harmless)
            who, mode = linear_sum_assignment(-(np.abs(R) ** 2).T)
            for c, r in zip(who, mode):
                j = int(g[r])
                if owners[c] is None:
                    track, overlap = self._new_track(step.labels[j], s), float("nan")
                    cohort = ("step", s, h)
                else:
                    track, overlap = self._ids[owners[c]], float(w[h, owners[c]])
                    cohort = (self._cohorts[owners[c]], h)
                out.append((j, track, overlap))
                new_states.append(U[:, g] @ R[:, c])
                new_ids.append(track)
                new_cohorts.append(cohort)
        # relabel cohorts with small tuples so that labels do not nest deeper at every step
        names = {}
        new_cohorts = [names.setdefault(c, ("cohort", s, len(names))) for c in new_cohorts]
        return out, np.column_stack(new_states), new_ids, new_cohorts


def _modes(vectors) -> np.ndarray:
    """Mode vectors as floats, or complex where they are (modes in a magnetic field)."""
    U = np.asarray(vectors)
    return U if np.iscomplexobj(U) else U.astype(float)
