"""Generalised (floating-mean, weighted, multi-harmonic) Lomb-Scargle periodogram.

Model at trial frequency ``f`` with ``K = nterms`` harmonics::

    m(t) = c0 + sum_{h=1..K} [a_h cos(2 pi h f t) + b_h sin(2 pi h f t)]

fitted by weighted least squares with weights ``w = 1/dy**2``.  The power in
the "standard" normalisation is the fraction of the weighted scatter about the
weighted mean that the periodic model removes::

    power(f) = (chi2_ref - chi2(f)) / chi2_ref,   chi2_ref = sum w (y - ybar_w)**2

(Zechmeister & Kuerster 2009, A&A 496, 577 for K = 1; Schwarzenberg-Czerny
1996, ApJ 460, L107 and VanderPlas 2018, ApJS 236, 16 for K > 1).  It lies in
[0, 1].

How it is computed
------------------
After subtracting the weighted mean from ``y``, the constant column can be
eliminated exactly: with basis functions ``phi_j`` (the cosines and sines),
``G_jk = sum w phi_j phi_k``, ``m_j = sum w phi_j``, ``W = sum w`` and
``b_j = sum w (y - ybar_w) phi_j``, the reduction of chi2 is
``b^T A^{-1} b`` with ``A = G - m m^T / W``.  Every entry of ``A`` and ``b``
follows from the trigonometric sums

    C_n(f) = sum w exp(2 pi i n f t)        n = 1 .. 2K
    S_h(f) = sum w y exp(2 pi i h f t)      h = 1 .. K

through product-to-sum identities (cos a cos b = [cos(a-b) + cos(a+b)]/2 ...).
The two methods differ only in how these sums are obtained:

``"exact"``
    direct summation, vectorised over blocks of frequencies and computed as
    matrix products (memory bounded by the block size);
``"fast"``
    for a uniform grid ``f_k = f0 + k df`` each sum over the grid is one
    type-1 non-uniform FFT (Barnett, Magland & af Klinteberg 2019, SIAM J. Sci.
    Comput. 41, C479; package ``finufft``) at tolerance 1e-14, all series and
    weights of one harmonic in a single call (``n_trans``).  This is the idea
    of Press & Rybicki (1989, ApJ 338, 277) with an accurate NUFFT in place of
    extirpolation.

The small symmetric systems (2K x 2K per frequency) are then solved for all
frequencies at once with a vectorised Cholesky factorisation.  A direction
whose pivot falls below 1e-11 of the total weight (a harmonic that the sampling
cannot distinguish from the others) is dropped rather than divided by zero.

All frequencies are in cycles per day and times in days.  Times are measured
from the middle of the baseline internally (the power does not depend on the
time origin; this keeps phases accurate for BJD-sized times).
"""

from __future__ import annotations

import numpy as np

from varstar.errors import InputError, ReductionError
from varstar.period.grid import validate_times

#: Tolerance requested from the non-uniform FFT.
NUFFT_EPS = 1e-14

#: ``method="auto"`` uses the fast path when points x frequencies reaches this.
AUTO_FAST_THRESHOLD = 1_000_000

#: A Cholesky pivot below this fraction of the total weight drops that direction.
PIVOT_TOL = 1e-11

_METHODS = ("auto", "exact", "fast")
_EXACT_BLOCK_ELEMENTS = 1 << 21  # complex elements per block of the direct sums
_FAST_BLOCK_BYTES = 1 << 28  # working memory per block of the fast path


# --------------------------------------------------------------------------- input checks


def check_nterms(nterms: int) -> int:
    """Return ``nterms`` as an int after checking it is a whole number >= 1."""
    if isinstance(nterms, bool) or not isinstance(nterms, (int, np.integer)) or nterms < 1:
        raise InputError(f"nterms must be a whole number >= 1 (harmonics in the model); got {nterms!r}")
    return int(nterms)


def check_frequencies(freq: np.ndarray) -> np.ndarray:
    """Return ``freq`` as a 1-D float array of positive finite frequencies.

    Raises
    ------
    InputError
        If ``freq`` is empty, not 1-D, or has non-finite or non-positive values.
    """
    freq = np.asarray(freq, dtype=float)
    if freq.ndim != 1 or freq.size == 0:
        raise InputError(f"freq must be a non-empty one-dimensional array (cycles/day); got shape {freq.shape}")
    if not np.all(np.isfinite(freq)):
        raise InputError("freq has non-finite values; build it with varstar.period.grid.frequency_grid")
    if not np.all(freq > 0):
        raise InputError("freq must be positive (cycles/day); frequency 0 is the constant the model already fits")
    return np.ascontiguousarray(freq)


def prepare_series(
    t: np.ndarray, y: np.ndarray, dy: np.ndarray | float, *, nterms: int = 1
) -> tuple[np.ndarray, np.ndarray, np.ndarray, bool]:
    """Check and shape ``t``, ``y``, ``dy`` for the periodogram cores.

    Parameters
    ----------
    t : array_like, shape (N,)
        Times in days.
    y : array_like, shape (N,) or (S, N)
        One series or ``S`` series sharing the times.
    dy : float or array_like, broadcastable to ``y``
        One-sigma uncertainties of ``y`` (> 0).
    nterms : int
        Number of harmonics of the model (sets the fewest usable points).

    Returns
    -------
    t : numpy.ndarray, shape (N,)
    y : numpy.ndarray, shape (S, N)
    dy : numpy.ndarray, shape (1, N) or (S, N)
        ``(1, N)`` when every series shares its uncertainties.
    single : bool
        True when ``y`` was one-dimensional.

    Raises
    ------
    InputError
        On empty, mis-shaped or non-finite input, non-positive ``dy``, fewer
        than 12 points or fewer points than ``2 nterms + 2``.
    """
    nterms = check_nterms(nterms)
    t = validate_times(t)
    n = t.size
    if n < 2 * nterms + 2:
        raise InputError(
            f"{n} observations cannot constrain a {nterms}-harmonic model "
            f"({2 * nterms + 1} parameters); use fewer harmonics or more data"
        )
    y = np.asarray(y, dtype=float)
    single = y.ndim == 1
    if y.ndim not in (1, 2) or y.shape[-1] != n:
        raise InputError(f"y must have shape ({n},) or (n_series, {n}) to match t; got {y.shape}")
    y2 = np.atleast_2d(y)
    if y2.shape[0] == 0:
        raise InputError("y holds no series (shape (0, N))")
    if not np.all(np.isfinite(y2)):
        bad = np.argwhere(~np.isfinite(y2))[0]
        raise InputError(
            f"y has non-finite values (NaN or inf), first at index {tuple(int(i) for i in bad[-y.ndim:])}; "
            "drop those observations first"
        )
    dy_arr = np.asarray(dy, dtype=float)
    try:
        dy2 = np.broadcast_to(dy_arr, y2.shape) if dy_arr.ndim == 2 else np.broadcast_to(dy_arr, (1, n))
    except ValueError:
        raise InputError(f"dy of shape {dy_arr.shape} does not match y of shape {y.shape}") from None
    if dy2.shape[0] != 1 and dy2.shape[0] != y2.shape[0]:
        raise InputError(f"dy of shape {dy_arr.shape} does not match y of shape {y.shape}")
    if not np.all(np.isfinite(dy2)) or not np.all(dy2 > 0):
        raise InputError("dy must be finite and positive (one-sigma uncertainties of y)")
    if dy2.shape[0] > 1 and np.all(dy2 == dy2[:1]):
        dy2 = dy2[:1]
    return t, np.ascontiguousarray(y2), np.ascontiguousarray(dy2), single


def uniform_grid_spacing(freq: np.ndarray) -> tuple[float, float] | None:
    """Return ``(f0, df)`` if ``freq`` is ``f0 + k df`` to rounding, else None."""
    freq = np.asarray(freq, dtype=float)
    m = freq.size
    if m < 2:
        return None
    f0 = float(freq[0])
    df = (float(freq[-1]) - f0) / (m - 1)
    if not df > 0:
        return None
    ideal = f0 + df * np.arange(m)
    tol = 1e-9 * df + 8.0 * np.finfo(float).eps * float(np.max(np.abs(freq)))
    if np.max(np.abs(freq - ideal)) > tol:
        return None
    return f0, df


def _finufft_available() -> bool:
    try:
        import finufft  # noqa: F401
    except ImportError:
        return False
    return True


def resolve_method(method: str, n_points: int, freq: np.ndarray) -> tuple[str, tuple[float, float] | None]:
    """Choose ``"exact"`` or ``"fast"`` for ``method`` and return the grid spacing.

    ``"auto"`` picks the fast path when the grid is uniform, ``finufft`` is
    installed and ``n_points * len(freq) >= AUTO_FAST_THRESHOLD``.

    Raises
    ------
    InputError
        For an unknown method, or ``"fast"`` on a non-uniform grid.
    ReductionError
        For ``"fast"`` when ``finufft`` is not installed.
    """
    if method not in _METHODS:
        raise InputError(f"method must be one of {', '.join(_METHODS)}; got {method!r}")
    if method == "exact":
        return "exact", None
    spacing = uniform_grid_spacing(freq)
    if method == "fast":
        if spacing is None:
            raise InputError(
                "method='fast' needs a uniform frequency grid (f0 + k*df), such as "
                "varstar.period.grid.frequency_grid gives; use method='exact' for other grids"
            )
        if not _finufft_available():
            raise ReductionError("method='fast' needs the finufft package (pip install finufft); or use method='exact'")
        return "fast", spacing
    if spacing is not None and n_points * freq.size >= AUTO_FAST_THRESHOLD and _finufft_available():
        return "fast", spacing
    return "exact", None


# --------------------------------------------------------------------------- trig sums


def _sums_exact(
    tau: np.ndarray, w: np.ndarray, wy: np.ndarray, freq: np.ndarray, nterms: int
) -> tuple[list[np.ndarray], list[np.ndarray]]:
    """Direct trig sums for the frequencies ``freq`` (m of them).

    Returns ``C`` (list over n = 1..2K of (Sw, m) complex arrays, sums of
    ``w exp(2 pi i n f tau)``) and ``S`` (list over h = 1..K of (S, m), sums
    of ``wy exp(2 pi i h f tau)``).
    """
    n_w = w.shape[0]
    both = np.concatenate([w, wy], axis=0).T.astype(complex)  # (N, Sw + S)
    wt = both[:, :n_w]
    ang = np.multiply.outer(freq, tau)
    ang -= np.floor(ang)
    ang *= 2.0 * np.pi
    e1 = np.empty(ang.shape, dtype=complex)  # exp(i angle), (m, N)
    np.cos(ang, out=e1.real)
    np.sin(ang, out=e1.imag)
    del ang
    eh = e1.copy()
    c_out, s_out = [], []
    for h in range(1, 2 * nterms + 1):
        if h > 1:
            eh *= e1
        if h <= nterms:
            res = (eh @ both).T
            c_out.append(res[:n_w])
            s_out.append(res[n_w:])
        else:
            c_out.append((eh @ wt).T)
    return c_out, s_out


def _sums_fast(
    tau: np.ndarray, w: np.ndarray, wy: np.ndarray, f0: float, df: float, m: int, nterms: int
) -> tuple[list[np.ndarray], list[np.ndarray]]:
    """Trig sums of :func:`_sums_exact` on the grid ``f0 + k df`` (k < m) by type-1 NUFFT.

    For harmonic ``h`` and ``f_k = f0 + k df`` the sum is
    ``sum_j c_j exp(i (k - k_mid) x_j)`` with ``x_j = 2 pi h df tau_j`` and
    ``c_j = v_j exp(2 pi i h (f0 + k_mid df) tau_j)``: a type-1 transform of
    the strengths ``c`` at the points ``x``, whose modes run from ``-k_mid``
    (``k_mid = m // 2``).  All weight and data rows of one harmonic go
    through one plan execution (``n_trans``); harmonics 1..K (which need the
    data rows too) share one plan, harmonics K+1..2K another.
    """
    import finufft

    n_w, n_s = w.shape[0], wy.shape[0]
    k_mid = m // 2  # finufft returns modes -(m//2) .. (m-1)//2
    f_mid = f0 + k_mid * df
    low = np.empty((nterms, n_w + n_s, m), dtype=complex)  # harmonics 1..K: weights, data
    high = np.empty((nterms, n_w, m), dtype=complex)  # harmonics K+1..2K: weights
    strengths = np.empty((n_w + n_s, tau.size), dtype=complex)
    plans = {}
    for h in range(1, 2 * nterms + 1):
        step = h * df * tau
        x = 2.0 * np.pi * (step - np.floor(step + 0.5))  # in [-pi, pi)
        cyc = h * f_mid * tau
        rot = np.exp(2j * np.pi * (cyc - np.floor(cyc)))
        np.multiply(w, rot, out=strengths[:n_w])
        rows = n_w
        if h <= nterms:
            np.multiply(wy, rot, out=strengths[n_w:])
            rows = n_w + n_s
        if rows not in plans:
            plans[rows] = finufft.Plan(1, (m,), n_trans=rows, eps=NUFFT_EPS, isign=1)
        plan = plans[rows]
        plan.setpts(x)
        target = low[h - 1] if h <= nterms else high[h - nterms - 1]
        plan.execute(strengths[:rows], out=target.reshape(rows, m))
    c_out = [low[h - 1, :n_w] for h in range(1, nterms + 1)] + [high[i] for i in range(nterms)]
    s_out = [low[h - 1, n_w:] for h in range(1, nterms + 1)]
    return c_out, s_out


# --------------------------------------------------------------------------- normal equations


def _reduction_from_sums(
    c: list[np.ndarray], wsum: np.ndarray, s: list[np.ndarray], nterms: int
) -> np.ndarray:
    """Chi-square reduction ``b^T A^{-1} b`` (S, m) from the trig sums.

    ``c[n-1]``: (Sw, m) sums of ``w exp(i n omega tau)``, n = 1..2K;
    ``wsum``: (Sw,) total weights; ``s[h-1]``: (S, m) sums of
    ``w (y - ybar) exp(i h omega tau)``.  Basis order: cos 1, sin 1, cos 2, ...
    """
    p = 2 * nterms
    wcol = wsum[:, None]

    def cre(n: int) -> np.ndarray:
        return wcol if n == 0 else c[abs(n) - 1].real

    def cim(n: int) -> np.ndarray:
        if n == 0:
            return np.zeros_like(wcol)
        return c[n - 1].imag if n > 0 else -c[-n - 1].imag

    mean = [None] * p  # sum w phi_j
    for h in range(1, nterms + 1):
        mean[2 * h - 2] = cre(h)
        mean[2 * h - 1] = cim(h)

    # Lower triangle of A = G - m m^T / W.
    a = [[None] * p for _ in range(p)]
    for ha in range(1, nterms + 1):
        for hb in range(1, ha + 1):
            re_d, re_s = cre(ha - hb), cre(ha + hb)
            im_d, im_s = cim(ha - hb), cim(ha + hb)
            ca, sa, cb, sb = 2 * ha - 2, 2 * ha - 1, 2 * hb - 2, 2 * hb - 1
            a[ca][cb] = 0.5 * (re_d + re_s) - mean[ca] * mean[cb] / wcol  # cos a cos b
            a[sa][sb] = 0.5 * (re_d - re_s) - mean[sa] * mean[sb] / wcol  # sin a sin b
            a[sa][cb] = 0.5 * (im_s + im_d) - mean[sa] * mean[cb] / wcol  # sin a cos b
            if ha != hb:
                # cos a sin b = [sin(a+b) - sin(a-b)] / 2
                a[ca][sb] = 0.5 * (im_s - im_d) - mean[ca] * mean[sb] / wcol

    rhs = [None] * p
    for h in range(1, nterms + 1):
        rhs[2 * h - 2] = s[h - 1].real
        rhs[2 * h - 1] = s[h - 1].imag

    # Vectorised Cholesky A = L L^T and forward substitution z = L^{-1} b.
    tol = PIVOT_TOL * wcol
    low = [[None] * p for _ in range(p)]
    z = [None] * p
    out = np.zeros(s[0].shape)
    for j in range(p):
        d = a[j][j].copy()
        for k in range(j):
            d -= low[j][k] ** 2
        ok = d > tol
        ljj = np.where(ok, np.sqrt(np.where(ok, d, 1.0)), np.inf)
        low[j][j] = ljj
        for i in range(j + 1, p):
            acc = a[i][j].copy()
            for k in range(j):
                acc -= low[i][k] * low[j][k]
            low[i][j] = acc / ljj
        acc = rhs[j]
        for k in range(j):
            acc = acc - low[j][k] * z[k]
        z[j] = acc / ljj
        out += z[j] ** 2
    return out


# --------------------------------------------------------------------------- public API


def reduction_prepared(
    t: np.ndarray,
    y2: np.ndarray,
    dy2: np.ndarray,
    freq: np.ndarray,
    nterms: int,
    kind: str,
    spacing: tuple[float, float] | None,
) -> tuple[np.ndarray, np.ndarray]:
    """Chi-square reduction for already checked input (no validation).

    Parameters
    ----------
    t : numpy.ndarray, shape (N,)
    y2 : numpy.ndarray, shape (S, N)
    dy2 : numpy.ndarray, shape (1, N) or (S, N)
    freq : numpy.ndarray, shape (M,)
    nterms : int
    kind : {"exact", "fast"}
    spacing : (f0, df) of the uniform grid, required for ``"fast"``

    Returns
    -------
    dchi2 : numpy.ndarray, shape (S, M)
    chi2_ref : numpy.ndarray, shape (S,)
    """
    w = 1.0 / dy2**2  # (Sw, N)
    wsum = w.sum(axis=1)  # (Sw,)
    ybar = (w * y2).sum(axis=1) / wsum  # (S,) - broadcasts when Sw == 1
    resid = y2 - ybar[:, None]
    wy = w * resid  # (S, N)
    chi2_ref = (wy * resid).sum(axis=1)

    tau = t - 0.5 * (t.min() + t.max())
    m = freq.size
    n_w, n_s = w.shape[0], y2.shape[0]
    out = np.empty((n_s, m))
    if kind == "exact":
        block = max(1, _EXACT_BLOCK_ELEMENTS // t.size)
        for lo in range(0, m, block):
            hi = min(m, lo + block)
            c, s = _sums_exact(tau, w, wy, freq[lo:hi], nterms)
            out[:, lo:hi] = _reduction_from_sums(c, wsum, s, nterms)
    else:
        f0, df = spacing
        p = 2 * nterms
        per_freq = 16 * (2 * nterms * n_w + nterms * n_s) + 8 * (p * (p + 1) * n_w + 3 * p * n_s)
        max_block = max(1024, _FAST_BLOCK_BYTES // per_freq)
        n_blocks = -(-m // max_block)
        edges = np.linspace(0, m, n_blocks + 1).round().astype(int)
        for lo, hi in zip(edges[:-1], edges[1:]):
            c, s = _sums_fast(tau, w, wy, f0 + lo * df, df, int(hi - lo), nterms)
            out[:, lo:hi] = _reduction_from_sums(c, wsum, s, nterms)
    return out, chi2_ref


def delta_chi2(
    t: np.ndarray,
    y: np.ndarray,
    dy: np.ndarray | float,
    freq: np.ndarray,
    *,
    nterms: int = 1,
    method: str = "auto",
) -> tuple[np.ndarray, np.ndarray]:
    """Chi-square reduction of the periodic model over the weighted constant.

    Parameters
    ----------
    t : array_like, shape (N,)
        Times in days.
    y : array_like, shape (N,) or (S, N)
        Values (e.g. magnitudes); ``S`` series may share ``t``.
    dy : float or array_like, broadcastable to ``y``
        One-sigma uncertainties (> 0); weights are ``1/dy**2``.
    freq : array_like, shape (M,)
        Trial frequencies in cycles/day (> 0).
    nterms : int, optional
        Harmonics in the model (default 1).
    method : {"auto", "exact", "fast"}, optional
        How the trigonometric sums are computed (see the module notes).

    Returns
    -------
    dchi2 : numpy.ndarray, shape (M,) or (S, M)
        ``chi2_ref - chi2(f)`` (>= 0 up to rounding).
    chi2_ref : float or numpy.ndarray, shape (S,)
        Weighted scatter about the weighted mean, ``sum w (y - ybar_w)**2``.

    Raises
    ------
    InputError
        On invalid input (see :func:`prepare_series`, :func:`check_frequencies`).
    """
    nterms = check_nterms(nterms)
    t, y2, dy2, single = prepare_series(t, y, dy, nterms=nterms)
    freq = check_frequencies(freq)
    kind, spacing = resolve_method(method, t.size, freq)
    out, chi2_ref = reduction_prepared(t, y2, dy2, freq, nterms, kind, spacing)
    if single:
        return out[0], float(chi2_ref[0])
    return out, chi2_ref


def gls_power(
    t: np.ndarray,
    y: np.ndarray,
    dy: np.ndarray | float,
    freq: np.ndarray,
    *,
    nterms: int = 1,
    method: str = "auto",
) -> np.ndarray:
    """Generalised Lomb-Scargle power, "standard" normalisation.

    ``power = (chi2_ref - chi2(f)) / chi2_ref`` for a floating-mean model with
    ``nterms`` harmonics and weights ``1/dy**2`` (Zechmeister & Kuerster 2009;
    Schwarzenberg-Czerny 1996 for ``nterms > 1``).

    Parameters
    ----------
    t : array_like, shape (N,)
        Times in days (N >= 12).
    y : array_like, shape (N,) or (S, N)
        Values; a 2-D ``y`` holds ``S`` series sharing ``t``, all computed in
        one call (one NUFFT per harmonic for all of them).
    dy : float or array_like, broadcastable to ``y``
        One-sigma uncertainties (> 0).
    freq : array_like, shape (M,)
        Trial frequencies in cycles/day, e.g. from
        :func:`varstar.period.grid.frequency_grid`.
    nterms : int, optional
        Harmonics in the model (default 1).
    method : {"auto", "exact", "fast"}, optional
        ``"exact"``: direct sums.  ``"fast"``: non-uniform FFT, needs a
        uniform grid; agrees with exact to ~1e-12 in power (to ~1e-8 at
        frequencies the sampling nearly cannot resolve, such as 1 c/d with
        short nightly windows and several harmonics).  ``"auto"``
        (default): fast when the grid is uniform and N*M >= 1e6.

    Returns
    -------
    numpy.ndarray, shape (M,) or (S, M)
        Power in [0, 1].

    Raises
    ------
    InputError
        On invalid input or a series without scatter.
    """
    dchi2, chi2_ref = delta_chi2(t, y, dy, freq, nterms=nterms, method=method)
    chi2_ref = np.atleast_1d(chi2_ref)
    if np.any(chi2_ref <= 0):
        bad = int(np.flatnonzero(chi2_ref <= 0)[0])
        raise InputError(f"series {bad} of y is constant; a periodogram needs some scatter")
    if dchi2.ndim == 1:
        return dchi2 / chi2_ref[0]
    return dchi2 / chi2_ref[:, None]


def weighted_dft(
    t: np.ndarray,
    y: np.ndarray,
    dy: np.ndarray | float,
    freq: np.ndarray,
    *,
    method: str = "auto",
) -> np.ndarray:
    """Weighted Fourier sums ``sum w (y - ybar_w) exp(2 pi i f (t - t_mid))`` at each frequency.

    ``w = 1/dy**2``, ``ybar_w`` the weighted mean and ``t_mid`` the middle of the
    baseline.  ``2 |S| / sum(w)`` is the amplitude spectrum of a (residual) series
    used by prewhitening (its modulus does not depend on the time origin).  The
    same two methods as :func:`gls_power`: ``"fast"`` is one type-1 non-uniform FFT
    over a uniform grid (all of a ten-year grid in a tenth of a second), ``"exact"``
    direct sums; ``"auto"`` picks the fast one for a uniform grid when points x
    frequencies reach :data:`AUTO_FAST_THRESHOLD`.

    Parameters
    ----------
    t : array_like, shape (N,)
    y : array_like, shape (N,) or (S, N)
    dy : float or array_like, broadcastable to ``y``
    freq : array_like, shape (M,)
    method : {"auto", "exact", "fast"}

    Returns
    -------
    numpy.ndarray of complex, shape (M,) or (S, M)
    """
    t, y2, dy2, single = prepare_series(t, y, dy, nterms=1)
    freq = check_frequencies(freq)
    kind, spacing = resolve_method(method, t.size, freq)
    w = 1.0 / dy2**2
    wy = w * (y2 - ((w * y2).sum(axis=1) / w.sum(axis=1))[:, None])
    wy = np.ascontiguousarray(np.broadcast_to(wy, y2.shape))
    tau = t - 0.5 * (t.min() + t.max())
    m = freq.size
    out = np.empty((y2.shape[0], m), dtype=complex)
    if kind == "exact":
        block = max(1, _EXACT_BLOCK_ELEMENTS // t.size)
        for lo in range(0, m, block):
            ang = np.multiply.outer(freq[lo : lo + block], tau)
            ang -= np.floor(ang)
            ang *= 2.0 * np.pi
            e = np.empty(ang.shape, dtype=complex)
            np.cos(ang, out=e.real)
            np.sin(ang, out=e.imag)
            out[:, lo : lo + block] = (e @ wy.T).T
    else:
        import finufft

        f0, df = spacing
        max_block = max(1024, _FAST_BLOCK_BYTES // (16 * y2.shape[0]))
        n_blocks = -(-m // max_block)
        edges = np.linspace(0, m, n_blocks + 1).round().astype(int)
        step = df * tau
        x = 2.0 * np.pi * (step - np.floor(step + 0.5))  # in [-pi, pi)
        for lo, hi in zip(edges[:-1], edges[1:]):
            k = int(hi - lo)
            f_mid = f0 + (lo + k // 2) * df  # finufft's modes run from -(k//2)
            cyc = f_mid * tau
            strengths = wy * np.exp(2j * np.pi * (cyc - np.floor(cyc)))
            plan = finufft.Plan(1, (k,), n_trans=y2.shape[0], eps=NUFFT_EPS, isign=1)
            plan.setpts(x)
            out[:, lo:hi] = plan.execute(strengths).reshape(y2.shape[0], k)
    return out[0] if single else out


def gls_model(
    t: np.ndarray,
    y: np.ndarray,
    dy: np.ndarray | float,
    frequency: float,
    nterms: int = 1,
    *,
    t_ref: float = 0.0,
    t_eval: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Weighted least-squares harmonic fit at one frequency.

    Model: ``c0 + sum_h [a_h cos(2 pi h f (t - t_ref)) + b_h sin(2 pi h f (t - t_ref))]``.

    Parameters
    ----------
    t, y, dy : array_like, shape (N,)
        Times (days), values and one-sigma uncertainties of one series.
    frequency : float
        Frequency in cycles/day (> 0).
    nterms : int, optional
        Harmonics (default 1).
    t_ref : float, optional
        Time origin of the phases (default 0).
    t_eval : array_like, optional
        Times at which to evaluate the model (default ``t``).

    Returns
    -------
    model : numpy.ndarray
        The fitted model at ``t_eval`` (or ``t``).
    coefficients : numpy.ndarray, shape (2 nterms + 1,)
        ``[c0, a_1, b_1, a_2, b_2, ...]``.
    covariance : numpy.ndarray, shape (2 nterms + 1, 2 nterms + 1)
        Covariance of the coefficients, ``(X^T W X)^{-1}``: valid when ``dy``
        are the true uncertainties (scale by the reduced chi-square otherwise).

    Raises
    ------
    InputError
        On invalid input.
    """
    nterms = check_nterms(nterms)
    t, y2, dy2, single = prepare_series(t, y, dy, nterms=nterms)
    if not single:
        raise InputError("gls_model fits one series; pass a one-dimensional y")
    frequency = float(check_frequencies(np.array([frequency]))[0])

    def design(times: np.ndarray) -> np.ndarray:
        cyc = frequency * (times - t_ref)
        cols = [np.ones_like(times)]
        for h in range(1, nterms + 1):
            ch = h * cyc
            ph = 2.0 * np.pi * (ch - np.floor(ch))
            cols += [np.cos(ph), np.sin(ph)]
        return np.column_stack(cols)

    x = design(t)
    sw = 1.0 / dy2[0]
    coef, *_ = np.linalg.lstsq(x * sw[:, None], y2[0] * sw, rcond=None)
    xw = x * sw[:, None]
    cov = np.linalg.pinv(xw.T @ xw)
    times = t if t_eval is None else np.asarray(t_eval, dtype=float)
    return design(times) @ coef, coef, cov
