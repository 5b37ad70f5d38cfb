"""Exact hydrogenic radial dipole integrals, stable to principal quantum numbers of ~1000.

All integrals are for Z = 1 and an infinite nuclear mass, in units of the Bohr radius a0:
``R(n l -> n' l') = integral of R_nl(r) r R_n'l'(r) r**2 dr``.  For a nucleus of charge Z and
reduced mass mu multiply by ``(m_e / mu) / Z``.  Signs are dropped: the functions return
``|R|``, which is all line strengths need.

The integrals come from a two-term recurrence downward in the lower orbital quantum number,
started at ``l' = n' - 1`` from the closed form of ``R(n n' -> n' n'-1)``.  Every coefficient of
the recurrence is positive, so no cancellation occurs; the running values are renormalised
at each step and carried with a log scale, so neither overflow nor underflow happens at large n.
The work is vectorised over many ``(n, n')`` pairs at once: one step per value of ``l'``.
"""

import numpy as np
from scipy.special import gammaln

__all__ = [
    "radial_dipole", "radial_ladder", "multiplet_sums", "multiplet_moments", "same_shell_dipole",
]


def _c(n, l):
    """sqrt(n**2 - l**2) / n, the ladder coefficient (float arrays)."""
    return np.sqrt(np.maximum(n * n - l * l, 0.0)) / n


def _log_r0(n, n2):
    """log |R(n, l=n2 -> n2, l=n2-1)| for n > n2 (closed form at the top of the ladder)."""
    n = np.asarray(n, dtype=float)
    n2 = np.asarray(n2, dtype=float)
    out = (
        (n2 + 2.0) * np.log(4.0 * n * n2)
        - np.log(4.0)
        + 0.5 * (gammaln(n + n2 + 1.0) - gammaln(n - n2) - gammaln(2.0 * n2))
        + (n - n2 - 2.0) * np.log(n - n2)
        - (n + n2 + 2.0) * np.log(n + n2)
    )
    return out


def _check_pairs(n_up, n_lo):
    n_up = np.asarray(n_up)
    n_lo = np.asarray(n_lo)
    if not (np.issubdtype(n_up.dtype, np.integer) and np.issubdtype(n_lo.dtype, np.integer)):
        raise TypeError(
            f"principal quantum numbers must be integers; got dtypes {n_up.dtype} and {n_lo.dtype}"
        )
    if np.any(n_lo < 1) or np.any(n_up <= n_lo):
        raise ValueError("need 1 <= n_lower < n_upper for every pair (same-shell integrals: "
                         "use same_shell_dipole)")
    return n_up, n_lo


def _ladder(n_up, n_lo, visit):
    """Run the recurrence for all pairs; call ``visit(sel, lt, P, M, s)`` at each step.

    ``sel`` indexes the active pairs (sorted order), ``lt`` their lower l, ``P = R(n lt+1 ->
    n' lt)`` and ``M = R(n lt-1 -> n' lt)`` in units of ``exp(s)``.  Returns the sort order.
    """
    order = np.argsort(-n_lo, kind="stable")
    nu = n_up[order].astype(float)
    nl = n_lo[order].astype(float)
    npair = nu.size
    s = _log_r0(nu, nl)
    # values at l' = n'-1; "next" values at l' = n' are zero (no such lower level)
    lt = nl - 1.0
    P = np.ones(npair)
    M = _c(nu, nl) / (2.0 * nl * _c(nu, lt))
    M_next = np.zeros(npair)  # M at lt+1
    nmax = int(nl[0]) if npair else 0
    counts = np.array([np.searchsorted(-nl, -(k + 1), side="right") for k in range(nmax)])
    for k in range(nmax):
        m = counts[k]  # pairs with n' >= k+1 are still active: a prefix of the sorted arrays
        if k > 0:
            lt = nl[:m] - 1.0 - k
            nu_k, nl_k = nu[:m], nl[:m]
            Pn = ((2.0 * lt + 3.0) * _c(nu_k, lt + 2.0) * P[:m]
                  + _c(nl_k, lt + 2.0) * M_next[:m]) / (2.0 * (lt + 2.0) * _c(nl_k, lt + 1.0))
            Mn = (_c(nu_k, lt + 1.0) * Pn + (2.0 * lt + 1.0) * _c(nl_k, lt + 1.0) * M[:m]) / (
                2.0 * (lt + 1.0) * _c(nu_k, np.maximum(lt, 0.0)))
            M_next = M[:m].copy()
            big = np.maximum(np.abs(Pn), np.abs(Mn))
            big[big == 0] = 1.0
            P, M, M_next = Pn / big, Mn / big, M_next / big
            s = s[:m] + np.log(big)
        else:
            lt = nl - 1.0
        visit(order[:m], lt, P, M, s[:m] if k else s)
    return order


def radial_dipole(n, l, n2, l2):
    """|R(n l -> n2 l2)| in units of a0 (Z = 1, infinite nuclear mass), vectorised.

    Parameters
    ----------
    n, l, n2, l2 : int or array of int
        Quantum numbers of the two states (broadcast together); ``|l - l2| == 1`` and
        ``n != n2``.  The order of the two states does not matter.

    Returns
    -------
    ndarray of float
        The magnitude of the radial dipole integral.
    """
    n, l, n2, l2 = np.broadcast_arrays(*(np.asarray(x) for x in (n, l, n2, l2)))
    if np.any(np.abs(l - l2) != 1):
        raise ValueError("dipole radial integrals need |l - l2| == 1")
    if np.any((l < 0) | (l >= n) | (l2 < 0) | (l2 >= n2)):
        raise ValueError("need 0 <= l < n and 0 <= l2 < n2 for every state")
    swap = n < n2
    nu = np.where(swap, n2, n).ravel()
    lu = np.where(swap, l2, l).ravel()
    nl = np.where(swap, n, n2).ravel()
    ll = np.where(swap, l, l2).ravel()
    out = np.zeros(nu.size)
    same = nu == nl
    if np.any(same):
        out[same] = same_shell_dipole(nu[same], np.maximum(lu[same], ll[same]))
    idx = np.flatnonzero(~same)
    if idx.size:
        nu_i, nl_i = _check_pairs(nu[idx], nl[idx])
        want_l, up_higher = ll[idx], lu[idx] > ll[idx]

        def visit(sel, lt, P, M, s):
            hit = want_l[sel] == lt.astype(int)
            if np.any(hit):
                val = np.where(up_higher[sel], P, M)
                out[idx[sel[hit]]] = np.abs(val[hit]) * np.exp(s[hit])

        _ladder(nu_i, nl_i, visit)
    return out.reshape(n.shape)


def same_shell_dipole(n, l):
    """|R(n l -> n l-1)| = 3/2 n sqrt(n**2 - l**2) in a0 (``l`` is the larger orbital number)."""
    n = np.asarray(n, dtype=float)
    l = np.asarray(l, dtype=float)
    return 1.5 * n * np.sqrt(n * n - l * l)


def radial_ladder(n_up, n_lo):
    """All dipole radial integrals between two shells.

    Parameters
    ----------
    n_up, n_lo : int
        Principal quantum numbers, ``n_up > n_lo >= 1``.

    Returns
    -------
    plus, minus : ndarray, shape (n_lo,)
        ``plus[l'] = |R(n_up l'+1 -> n_lo l')|`` and ``minus[l'] = |R(n_up l'-1 -> n_lo l')|``
        (``minus[0]`` is 0: no such state), in a0.
    """
    nu, nl = _check_pairs(np.array([n_up]), np.array([n_lo]))
    plus = np.zeros(int(n_lo))
    minus = np.zeros(int(n_lo))

    def visit(sel, lt, P, M, s):
        i = int(lt[0])
        plus[i] = abs(P[0]) * np.exp(s[0])
        minus[i] = abs(M[0]) * np.exp(s[0]) if i > 0 else 0.0

    _ladder(nu, nl, visit)
    return plus, minus


def multiplet_sums(n_up, n_lo, visit_level=None):
    """Sum over all l of ``max(l, l') |R|**2`` for each shell pair (no spin factor), in a0**2.

    Parameters
    ----------
    n_up, n_lo : array of int
        Upper and lower principal quantum numbers, ``n_up > n_lo >= 1``.
    visit_level : callable, optional
        Called as ``visit_level(sel, l_up, l_lo, weight, log_scale)`` for every ``(l, l')`` step
        with ``weight = max(l, l') |R|**2 / exp(2 log_scale)`` for pairs ``sel``; lets a caller
        form weighted sums (centroids, A values) in the same pass.

    Returns
    -------
    ndarray of float
        ``sum_{l,l'} max(l, l') |R(n_up l -> n_lo l')|**2``.
    """
    nu, nl = _check_pairs(np.atleast_1d(n_up), np.atleast_1d(n_lo))
    total = np.zeros(nu.size)

    def visit(sel, lt, P, M, s):
        wp = (lt + 1.0) * P * P
        wm = lt * M * M
        total[sel] += (wp + wm) * np.exp(2.0 * s)
        if visit_level is not None:
            visit_level(sel, lt + 1.0, lt, wp, s)
            mm = lt > 0
            if np.any(mm):
                visit_level(sel[mm], lt[mm] - 1.0, lt[mm], wm[mm], s[mm])

    _ladder(nu, nl, visit)
    return total


_RENORM_EVERY = 4  # rescale period of multiplet_moments; one step changes |P|, |M| by < 50 (n <= 1e4)


def multiplet_moments(n_up, n_lo, term):
    """Line-strength weighted moments of the component wavenumbers of each shell pair.

    One pass of the same recurrence as `multiplet_sums`, fused with the weighting, run on
    contiguous prefixes of the pairs sorted by ``n_lo`` (no per-step callbacks or scatter).

    Parameters
    ----------
    n_up, n_lo : array of int
        Upper and lower principal quantum numbers, ``n_up > n_lo >= 1``.
    term : ndarray of float
        Level term values, flat over ``(n, l)``: ``term[n (n - 1) / 2 + l]`` for every
        ``n <= max(n_up)`` and ``0 <= l < n``.  A component's wavenumber is
        ``term(n_lo, l') - term(n_up, l)``.

    Returns
    -------
    m1, m3, m4 : ndarray of float
        ``sum_{l,l'} w sigma**k`` for k = 1, 3, 4, with ``w = max(l, l') |R|**2`` (a0**2, no
        spin factor) and ``sigma`` the component wavenumber (units of ``term``).
    """
    n_up, n_lo = _check_pairs(np.atleast_1d(n_up), np.atleast_1d(n_lo))
    term = np.asarray(term, dtype=float)
    need = int(n_up.max()) * (int(n_up.max()) + 1) // 2 if n_up.size else 0
    if term.size < need:
        raise ValueError(f"'term' must hold {need} values (all l of n <= {int(n_up.max())}); "
                         f"got {term.size}")
    order = np.argsort(-n_lo, kind="stable")
    nu_i = n_up[order].astype(np.int64)
    nl_i = n_lo[order].astype(np.int64)
    nu = nu_i.astype(float)
    nl = nl_i.astype(float)
    npair = nu.size
    # flat indices of (n_lo, l' = n_lo - 1) and (n_up, l = n_lo - 1); step k lowers both by k
    idx_lo = nl_i * (nl_i - 1) // 2 + nl_i - 1
    idx_up = nu_i * (nu_i - 1) // 2 + nl_i - 1
    m1 = np.zeros(npair)
    m3 = np.zeros(npair)
    m4 = np.zeros(npair)
    if npair == 0:
        return m1, m3, m4
    s = _log_r0(nu, nl)
    lt = nl - 1.0
    P = np.ones(npair)
    cu_l = _c(nu, lt)  # c(n_up, lt); carried down as c(n_up, lt + 1) of the next step
    M = _c(nu, nl) / (2.0 * nl * cu_l)
    M_next = np.zeros(npair)
    cu_l1 = _c(nu, nl)  # c(n_up, lt + 1)
    cl_l1 = _c(nl, nl)  # c(n_lo, lt + 1)
    nmax = int(nl[0])
    counts = np.searchsorted(-nl, -(np.arange(nmax) + 1.0), side="right")
    # integer-valued floats below are exact, so these rearrangements change no bits
    lt0 = nl - 1.0
    nu2, nl2 = nu * nu, nl * nl
    for k in range(nmax):
        m = counts[k]
        if k > 0:
            lt = lt0[:m] - k
            nu_k, nl_k = nu[:m], nl[:m]
            cu_l2, cl_l2 = cu_l1[:m], cl_l1[:m]  # c(., lt + 2) = last step's c(., lt + 1)
            cu_l1 = cu_l[:m]
            lp1 = lt + 1.0
            tl = lt + lt
            cl_l1 = np.sqrt(nl2[:m] - lp1 * lp1) / nl_k  # _c(n_lo, lt + 1); n_lo >= lt + 1
            cu_l = np.sqrt(nu2[:m] - lt * lt) / nu_k  # _c(n_up, lt); n_up > lt
            Pn = ((tl + 3.0) * cu_l2 * P[:m] + cl_l2 * M_next[:m]) / ((tl + 4.0) * cl_l1)
            Mn = (cu_l1 * Pn + (tl + 1.0) * cl_l1 * M[:m]) / ((tl + 2.0) * cu_l)
            if k % _RENORM_EVERY:
                M_next, P, M = M[:m], Pn, Mn
                s, e2s = s[:m], e2s[:m]
            else:
                big = np.maximum(np.abs(Pn), np.abs(Mn))
                big[big == 0] = 1.0
                M_next = M[:m] / big
                P = Pn / big
                M = Mn / big
                s = s[:m] + np.log(big)
                e2s = np.exp(2.0 * s)
        else:
            lp1 = lt + 1.0
            e2s = np.exp(2.0 * s)
        t_lo = term[idx_lo[:m] - k]
        # l = l' + 1
        sig = t_lo - term[idx_up[:m] - (k - 1)]
        w = lp1 * P * P * e2s
        s3 = w * (sig * sig * sig)
        m3[:m] += s3
        m4[:m] += s3 * sig
        m1[:m] += w * sig
        # l = l' - 1 (weight l' M**2 vanishes at l' = 0, where the index is a harmless neighbour)
        sig = t_lo - term[idx_up[:m] - (k + 1)]
        w = lt * M * M * e2s
        s3 = w * (sig * sig * sig)
        m3[:m] += s3
        m4[:m] += s3 * sig
        m1[:m] += w * sig
    out = [np.empty(npair) for _ in range(3)]
    for o, v in zip(out, (m1, m3, m4)):
        o[order] = v
    return tuple(out)
