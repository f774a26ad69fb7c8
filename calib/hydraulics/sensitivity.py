"""Derivatives of a converged steady state with respect to parameters, by implicit differentiation.

At a solution the energy and mass equations F1 = 0, F2 = 0 hold; for a parameter p,
``[[D, A12], [A21, 0]] [dQ/dp; dH/dp] = -[dF1/dp; dF2/dp]`` with D = dh/dQ. The same Schur complement
as the solver's gives all p columns with one factorization. Used by the calibration's Jacobian.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from calib.errors import InputError
from calib.hydraulics import headloss as hl
from calib.hydraulics import valves
from calib.hydraulics.result import SolveResult


def sensitivities(solver, result: SolveResult, dF1_dp, dF2_dp):
    """Implicit differentiation at a converged snapshot: ``(dH, dQ)`` for p parameters.

    Solves ``[[D, A12], [A21, 0]] [dQ; dH] = -[dF1/dp; dF2/dp]`` (D = dh/dQ at the solution)
    by the same Schur complement as the solver, one factorization for all p columns:
    ``S dH = dF2/dp - A21 D^-1 dF1/dp``, ``dQ = -D^-1 (dF1/dp + A12 dH)``.
    ``dF1_dp`` (n_links x p), ``dF2_dp`` (n_junctions x p), dense or sparse. Closed links keep
    dQ = 0 (their rows of dF1 are ignored); isolated junctions keep dH = 0.
    Returns dH (n_junctions x p) [m per unit p] and dQ (n_links x p) [m3/s per unit p].
    Source: the implicit function theorem on the Todini-Pilati system; e.g. Lansey and Basnet
    (1991), J. Water Resour. Plann. Manage. 117(1), for its use in calibration.
    """
    nj, pat = solver.nj, solver.pattern
    active, iso = result._active, result._isolated_mask
    w = np.where(active, 1.0 / result._grad, 0.0)
    b1 = dF1_dp.toarray() if sp.issparse(dF1_dp) else np.asarray(dF1_dp, dtype=float)
    b2 = dF2_dp.toarray() if sp.issparse(dF2_dp) else np.asarray(dF2_dp, dtype=float)
    vector = b1.ndim == 1
    b1 = b1.reshape(len(w), -1)
    b2 = b2.reshape(nj, -1)
    if b1.shape[1] != b2.shape[1]:
        raise InputError(f"dF1_dp has {b1.shape[1]} columns but dF2_dp {b2.shape[1]}",
                         field="dF1_dp", expected="the same number p of parameters")
    state = getattr(result, "_valve_state", None)
    if getattr(solver, "nv", 0) and state is not None and \
            ((state == valves.ACTIVE) & solver.valves.auto).any():
        dH, dQ = valves.sensitivity_solve(solver, result, w, b1, b2, pat, iso)
        return (dH[:, 0], dQ[:, 0]) if vector else (dH, dQ)
    wb1 = w[:, None] * b1
    rhs = b2 - pat.inflow_matrix(wb1)
    rhs[iso] = 0.0
    extra = iso.astype(float)
    S = pat.hold(pat.assemble(w, extra), iso)  # iso includes held junctions
    dH = _solve(solver, result, S, rhs, w, extra, iso) if (rhs.shape[1] and nj) \
        else np.zeros((nj, rhs.shape[1]))
    dQ = -(wb1 - w[:, None] * pat.across_junctions(dH))  # sources: dH = 0
    if vector:
        return dH[:, 0], dQ[:, 0]
    return dH, dQ


def _solve(solver, result, S, rhs, w, extra, iso):
    """``S^-1 rhs`` at a solution: with the factorization kept beside it
    (``NetworkSolver.kept_factor``) where that factors this very S (a second call at the same
    solution), else by a factorization of S, which is then kept beside the solution: a warm start
    from it (the fit's next evaluation of this snapshot) begins with the exact factor of the last
    solution. Scratch memory where nothing is kept (small networks, dense checks).

    Not done: CG preconditioned with the factor the solve ended with. Measured on the 7,938-pipe
    grid's fit, that factor is never close to S at the solution (the last Newton steps are solved
    by CG with an older factor: link weights 1-100 % away), and a CG step with the p columns costs
    a fifth of a factorization. The report's hydrant-curve slopes (one column each) the same
    (benchmarks/README.md, C5): CG to 1e-10 of the right-hand side mostly needs 14-25 steps,
    at 9-10 steps to a factorization's time; 56 of 87 factorizations saved, the CPU unchanged."""
    keeps = hasattr(solver, "kept_factor") and solver._keeps()
    kept = solver.kept_factor(result) if keeps else None
    if kept is not None and not kept.stale and np.array_equal(kept.fixed, iso) and \
            np.array_equal(kept.w, w) and np.array_equal(kept.extra, extra):
        return kept.factor(rhs)
    pat = solver.pattern
    if keeps:
        spare = solver._spare()
        factor = spare.factor if spare is not None and spare.factor.refactor(S) else None
        factor = factor or pat.factorize(S)
        solver.keep_factor(result, factor, w.copy(), extra.copy(), iso.copy())
        return factor(rhs)
    return pat.factorize_scratch(S)(rhs)


def dheadloss_droughness(solver, result: SolveResult) -> np.ndarray:
    """Derivative of each pipe's head loss with respect to its own roughness parameter.

    Hazen-Williams: ``dh_k/dC_k = -1.852 hf_k / C_k`` [m per unit C], hf the friction part only
    (minor losses do not depend on C), exact also in the regularized blend since hf is
    proportional to C^-1.852 there too. Darcy-Weisbach: ``dh_k/de_k`` [m per m of roughness
    height] through Colebrook (see ``headloss.darcy_weisbach_law``). 0 for a closed pipe.
    """
    net = solver.network
    active = result._active[: solver.np_]
    q = result.flow
    if solver.headloss == "hazen-williams":
        # (key, roughness, r) of the solver's last solve
        memo = getattr(solver, "_rough_memo", None)
        if memo is not None and memo[1] is result.roughness:
            r = memo[2]  # the resistances this very solution was solved with: two powers saved
        else:
            r = hl.hazen_williams_resistance(net.length, net.diameter, result.roughness)
        hf, _ = hl.hazen_williams_law(q, r, solver.q_eps)
        d = -hl.HW_FLOW_EXPONENT * hf / result.roughness
    else:
        _, _, d = hl.darcy_weisbach_law(q, net.length, net.diameter, result.roughness,
                                        solver.viscosity)
    return np.where(active, d, 0.0)
