"""The simulated gain medium: a quasi-three-level rate equation, slice by slice along the sample.

Pure numpy, no I/O and no clock: this module only knows densities, fluxes and step lengths.
The sample (length L, dopant density N) is cut into S equal slices of thickness dz = L / S. In
slice i the excited density N2_i obeys

    dN2/dt = (sigma_ap N1 - sigma_ep N2) Phi_p,i + (sigma_as N1 - sigma_es N2) Phi_s - N2 / tau

with N1 = N - N2. For constant fluxes this is linear in N2, dN2/dt = A N - k N2, with
A = sigma_ap Phi_p + sigma_as Phi_s and k = (sigma_ap + sigma_ep) Phi_p + (sigma_as + sigma_es)
Phi_s + 1/tau, so one step of length dt is solved exactly:
N2(t + dt) = N2ss + (N2 - N2ss) exp(-k dt), N2ss = A N / k.

The pump (a top-hat beam) is absorbed on its way through: across slice i its flux falls by
exp(-(sigma_ap N1_i - sigma_ep N2_i) dz), and slice i sees the average of the flux over its own
thickness. The pump flux therefore couples the slices (the front bleaches, the back gets more);
within one step the flux profile is held at the value of the step-averaged N2 of a predictor
step (an exponential predictor-corrector), so the coupling is handled to second order in dt
while each slice's own response stays exact. The probe is weak: its own stimulated rate uses
its incident flux in every slice.

A `Piece` is one step's exact trajectory, N2_i(s) = N2ss_i + (N2_0,i - N2ss_i) exp(-k_i s) for
0 <= s < dt, together with a degree-7 polynomial in s that reproduces the slice-averaged
<N2>(s) to better than 1e-6 of the step's transient amplitude (Chebyshev-node interpolation;
steps are kept short enough, k dt <= 2.5, for that bound), so that samples are evaluated
vectorised over many steps at once.

References
----------
.. [1] O. Svelto, *Principles of Lasers*, 5th ed., Springer, 2010, ch. 7 (rate equations of
   quasi-three-level media) and sec. 2.4 (Beer-Lambert absorption).
.. [2] W. Koechner, *Solid-State Laser Engineering*, 6th ed., Springer, 2006, sec. 1.4.
.. [3] M. Hochbruck and A. Ostermann, "Exponential integrators", Acta Numerica 19 (2010)
   209-286 (exponential Euler / predictor-corrector steps for stiff linear-dominated ODEs).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: Number of interpolation nodes (polynomial degree + 1) of a piece's <N2>(s).
NODES = 8
#: Largest k dt a step may take, so the degree-7 interpolation stays within 1e-6 (see module doc).
MAX_K_DT = 2.5

_X_NODES = np.cos(np.pi * (2 * np.arange(NODES) + 1) / (2 * NODES))[::-1]  # Chebyshev, ascending
_S_NODES = (_X_NODES + 1.0) / 2.0  # the same nodes as fractions of the step, in [0, 1]
#: values at the nodes -> monomial coefficients in x = 2 s / dt - 1 (well conditioned on [-1, 1])
_VALUES_TO_COEFS = np.linalg.inv(np.vander(_X_NODES, NODES, increasing=True))


@dataclass(frozen=True)
class Inputs:
    """What drives the medium during one step (all constant over the step).

    ``pump_flux`` is the incident pump photon flux (photons m⁻² s⁻¹); ``probe_up`` is
    sigma_as Phi_s and ``probe_k`` is (sigma_as + sigma_es) Phi_s, both in s⁻¹.
    """

    pump_flux: float
    probe_up: float
    probe_k: float


class Piece:
    """One step's exact trajectory of every slice, plus a polynomial for its mean over slices."""

    __slots__ = ("t0", "dt", "end", "n2_0", "n2ss", "k", "coefs", "constant", "end_state", "error")

    def __init__(
        self,
        t0: float,
        dt: float,
        n2_0: np.ndarray,
        n2ss: np.ndarray,
        k: np.ndarray,
        coefs: np.ndarray,
        constant: bool,
    ):
        self.t0 = t0
        self.dt = dt
        self.end = t0 + dt  # the owner may set it to an exact edge time
        self.n2_0 = n2_0
        self.n2ss = n2ss
        self.k = k
        self.coefs = coefs
        self.constant = constant
        self.end_state = n2_0 if constant else None  # set by the stepper
        self.error = 0.0  # predictor-corrector difference at the end, relative to N_total

    def state_at(self, s: float) -> np.ndarray:
        """Excited density of every slice (m⁻³) at ``s`` seconds into the piece (exact)."""
        if self.constant:
            return self.n2_0.copy()
        return self.n2ss + (self.n2_0 - self.n2ss) * np.exp(-self.k * s)

    def mean_at(self, s: float) -> float:
        """Exact slice-averaged excited density at ``s`` seconds into the piece."""
        return float(np.mean(self.state_at(s)))


class GainMedium:
    """Slices of a quasi-three-level medium under a top-hat pump; closed-form steps.

    Parameters
    ----------
    length : float
        Sample length, m.
    n_total : float
        Dopant density, m⁻³.
    tau : float
        Upper-state lifetime, s.
    sigma_ap, sigma_ep : float
        Absorption and emission cross-sections at the pump wavelength, m² (sigma_ap > 0).
    slices : int
        Number of slices along the length (1 or more).
    """

    def __init__(
        self, length: float, n_total: float, tau: float, sigma_ap: float, sigma_ep: float, slices: int
    ):
        for name, value in (("length", length), ("n_total", n_total), ("tau", tau), ("sigma_ap", sigma_ap)):
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
                raise ValueError(f"{name}: expected a positive finite number, got {value!r}")
        if not (math.isfinite(sigma_ep) and sigma_ep >= 0):
            raise ValueError(f"sigma_ep: expected a non-negative finite number, got {sigma_ep!r}")
        if isinstance(slices, bool) or not isinstance(slices, int) or slices < 1:
            raise ValueError(f"slices: expected a whole number of at least 1, got {slices!r}")
        self.length = float(length)
        self.n_total = float(n_total)
        self.tau = float(tau)
        self.sigma_ap = float(sigma_ap)
        self.sigma_ep = float(sigma_ep)
        self.slices = slices
        self.dz = self.length / slices
        self._sap_n = self.sigma_ap * self.n_total  # unbleached pump absorption coefficient, 1/m
        self._sab = self.sigma_ap + self.sigma_ep
        self._sap_n_dz = self._sap_n * self.dz
        self._sab_dz = self._sab * self.dz
        self._decay = 1.0 / self.tau
        self._trans = np.ones(slices + 1)  # work array: transmission up to each slice boundary
        self._s_nodes_end = np.append(_S_NODES, 1.0)
        self._values_to_coefs = _VALUES_TO_COEFS / slices

    # -- pump propagation ----------------------------------------------------------------------
    def pump_profile(self, n2: np.ndarray, pump_flux: float) -> tuple[np.ndarray, float]:
        """(slice-averaged pump flux of every slice, fraction of the pump leaving the sample).

        Across slice i the flux falls by exp(-a_i dz) with a_i = sigma_ap N1_i - sigma_ep N2_i
        (Beer-Lambert). The average over the slice is Phi_in,i (1 - exp(-a_i dz)) / (a_i dz) =
        Phi_0 (T_i-1 - T_i) / (a_i dz), T_i being the transmission up to the end of slice i.
        a_i > 0 always: the pump alone cannot excite beyond sigma_ap / (sigma_ap + sigma_ep).
        """
        od = self._sap_n_dz - self._sab_dz * n2
        trans = self._trans
        np.cumsum(od, out=trans[1:])
        np.negative(trans[1:], out=trans[1:])
        np.exp(trans[1:], out=trans[1:])
        phi = trans[:-1] - trans[1:]
        phi *= pump_flux
        phi /= np.maximum(od, 1e-300)
        return phi, float(trans[-1])

    def _rates(self, n2: np.ndarray, inputs: Inputs) -> tuple[np.ndarray, np.ndarray]:
        """(k, N2ss) of every slice with the pump profile of ``n2`` held."""
        if inputs.pump_flux > 0.0:
            phi, _ = self.pump_profile(n2, inputs.pump_flux)
            k = self._sab * phi
            k += inputs.probe_k + self._decay
            n2ss = self._sap_n * phi
            n2ss += inputs.probe_up * self.n_total
            n2ss /= k
        else:
            k = np.full(self.slices, inputs.probe_k + self._decay)
            n2ss = np.full(self.slices, inputs.probe_up * self.n_total / k[0])
        return k, n2ss

    def probe_ln_transmission(self, n2: np.ndarray, sigma_as: float, sigma_es: float) -> float:
        """ln T of a weak probe through the sample: sum_i (sigma_es N2_i - sigma_as N1_i) dz."""
        return float(np.sum(sigma_es * n2 - sigma_as * (self.n_total - n2)) * self.dz)

    def max_rate(self, inputs: Inputs) -> float:
        """Upper bound of k over the sample (the front slice of an unbleached sample), 1/s."""
        return self._sab * inputs.pump_flux + inputs.probe_k + self._decay

    # -- stepping ---------------------------------------------------------------------------
    def step(self, t0: float, n2: np.ndarray, inputs: Inputs, dt: float) -> Piece:
        """One closed-form step of length ``dt`` from ``n2`` (exponential predictor-corrector)."""
        k, n2ss = self._rates(n2, inputs)
        predicted = None
        if inputs.pump_flux > 0.0:
            # predictor: the exact trajectory with the start profile; its mean over the step,
            # N2ss + (N2 - N2ss) (1 - exp(-k dt)) / (k dt)   (k dt > 0 since k >= 1/tau)
            gone = -np.expm1(-k * dt)
            away = n2 - n2ss
            predicted = n2 - away * gone
            mean = gone / (k * dt)
            mean *= away
            mean += n2ss
            # corrector: hold the pump profile of the step-averaged state
            k, n2ss = self._rates(mean, inputs)
        amp = n2 - n2ss
        # exp(-k s) at the interpolation nodes and at the end of the step, (NODES + 1, S)
        e_nodes = np.exp(np.multiply.outer(self._s_nodes_end * -dt, k))
        coefs = self._values_to_coefs @ (e_nodes[:-1] @ amp + n2ss.sum())
        end = e_nodes[-1] * amp
        end += n2ss
        piece = Piece(t0, dt, n2, n2ss, k, coefs, constant=False)
        piece.end_state = end
        # predictor - corrector: estimates the first-order error, steers the step length
        if predicted is not None:
            piece.error = float(np.max(np.abs(end - predicted))) / self.n_total
        return piece

    def constant_piece(self, t0: float, dt: float, n2: np.ndarray) -> Piece:
        """A piece in which nothing changes (the medium is at its steady state)."""
        coefs = np.zeros(NODES)
        coefs[0] = float(n2.sum()) / self.slices
        frozen = n2.copy()
        return Piece(t0, dt, frozen, frozen, np.zeros(self.slices), coefs, constant=True)

    def steady_gap(self, n2: np.ndarray, inputs: Inputs) -> float:
        """max |N2 - N2ss| / N_total for the given inputs (0 at the steady state)."""
        _, n2ss = self._rates(n2, inputs)
        return float(np.max(np.abs(n2 - n2ss))) / self.n_total

    def steady_state(self, inputs: Inputs, *, tolerance: float = 1e-12, max_iter: int = 10000) -> np.ndarray:
        """The self-consistent steady-state profile (solved slice by slice, front to back).

        Slice i's flux depends only on the slices before it and on itself, so each slice is a
        scalar fixed point N2 = N2ss(N2), solved by bisection on N2 - N2ss(N2) (monotone).
        """
        n2 = np.zeros(self.slices)
        flux_in = inputs.pump_flux
        nt = self.n_total
        for i in range(self.slices):

            def gap(x: float, flux_in: float = flux_in) -> float:
                od = (self._sap_n - self._sab * x) * self.dz
                avg = (-math.expm1(-od) / od) if abs(od) > 1e-12 else 1.0
                phi = flux_in * avg
                k = self._sab * phi + inputs.probe_k + self._decay
                return x - (self._sap_n * phi + inputs.probe_up * nt) / k

            lo, hi = 0.0, nt
            for _ in range(max_iter):
                mid = 0.5 * (lo + hi)
                if gap(mid) > 0:
                    hi = mid
                else:
                    lo = mid
                if hi - lo <= tolerance * nt:
                    break
            n2[i] = 0.5 * (lo + hi)
            od = (self._sap_n - self._sab * n2[i]) * self.dz
            flux_in *= math.exp(-od)
        return n2


def evaluate_pieces(
    starts: np.ndarray, dts: np.ndarray, coefs_t: np.ndarray, times: np.ndarray
) -> np.ndarray:
    """Slice-averaged N2 at sorted ``times`` from pieces sorted by start (vectorised).

    ``coefs_t`` is (NODES, n_pieces): the pieces' polynomial coefficients, one row per power;
    ``dts`` must be finite (constant pieces carry zero coefficients beyond the first). Each
    sample uses the last piece starting at or before it. The coefficients are spread over the
    samples with `numpy.repeat` (sequential memory access) rather than gathered.
    """
    n = times.size
    if n == 0:
        return np.empty(0)
    lo = max(int(np.searchsorted(starts, times[0], side="right")) - 1, 0)
    hi = max(int(np.searchsorted(starts, times[-1], side="right")), lo + 1)
    first = np.searchsorted(times, starts[lo:hi], side="left")
    first[0] = 0
    counts = np.diff(first, append=n)
    coefs_t = coefs_t[:, lo:hi]
    degree = NODES - 1
    while degree > 0 and not np.any(coefs_t[degree]):
        degree -= 1
    if hi - lo == 1:
        c = coefs_t[:, 0]
        if degree == 0:
            return np.full(n, c[0])
        x = (times - starts[lo]) * (2.0 / dts[lo]) - 1.0
        y = np.full(n, c[degree])
        for p in range(degree - 1, -1, -1):
            y *= x
            y += c[p]
        return y
    if degree == 0:
        return np.repeat(coefs_t[0], counts)
    x = times - np.repeat(starts[lo:hi], counts)
    x *= np.repeat(2.0 / dts[lo:hi], counts)
    x -= 1.0
    y = np.repeat(coefs_t[degree], counts)
    for p in range(degree - 1, -1, -1):
        y *= x
        y += np.repeat(coefs_t[p], counts)
    return y
