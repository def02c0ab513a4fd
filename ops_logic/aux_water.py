"""Auxiliary-water supply hydraulics: control valves, gravity conduits and pumps.

The auxiliary (attraction) water of a fishway comes either by gravity from the upstream
pool through a conduit with a control valve, or from pumps. All functions are pure, on SI
floats; out-of-range inputs raise ``ValueError`` instead of being extrapolated.

References
----------
.. [IEC60534] IEC 60534-1, Industrial-process control valves - Part 1: Control valve
   terminology and general considerations; ANSI/ISA-75.01.01 / IEC 60534-2-1 (flow
   coefficients Cv and Kv). The inherent characteristics f = x (linear) and
   f = R^(x - 1) (equal percentage) are the textbook forms behind that terminology.
.. [Colebrook1939] Colebrook, C. F. (1939). "Turbulent flow in pipes, with particular
   reference to the transition region between the smooth and rough pipe laws."
   J. Inst. Civil Eng. 11(4), 133-156 (solved here by ``fluids.friction.friction_factor``).
.. [Avila2011] Avila, K. et al. (2011). "The onset of turbulence in pipe flow." Science
   333(6039), 192-196 (laminar limit Re = 2040 used by ``fluids``).
.. [DarcyWeisbach] Darcy-Weisbach energy equation for a full conduit, e.g. White, F. M.,
   Fluid Mechanics, chapter 6 (pipe flow, minor losses, exit loss K = 1).
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np
from fluids.fittings import Cv_to_K, Kv_to_K
from fluids.friction import friction_factor
from scipy.optimize import brentq

from ops_logic.properties import water_density, water_viscosity

__all__ = [
    "EXIT_LOSS_K",
    "G_M_S2",
    "VALVE_CHARACTERISTICS",
    "PumpCurve",
    "conduit_flow",
    "conduit_head_loss",
    "pump_station_flow",
    "valve_flow_fraction",
    "valve_loss_coefficient",
]

G_M_S2 = 9.80665
"""Standard acceleration of gravity [m/s²]."""
EXIT_LOSS_K = 1.0
"""Loss coefficient of the conduit outlet into the pool (all velocity head lost) [-]."""
VALVE_CHARACTERISTICS = ("linear", "equal_percentage")
"""Inherent valve characteristics understood by :func:`valve_flow_fraction`."""

RELATIVE_ROUGHNESS_MAX = 0.05
"""Largest relative roughness ε/D accepted (the extent of the Moody chart) [-]."""
REYNOLDS_MAX = 1e8
"""Largest Reynolds number accepted (the extent of the Moody chart) [-]."""


def _finite(value: float, name: str) -> float:
    v = float(value)
    if not math.isfinite(v):
        raise ValueError(f"{name}={value!r} must be a finite number")
    return v


# --------------------------------------------------------------------------- valves
def valve_flow_fraction(opening_pct: float, characteristic: str,
                        rangeability: float = 50.0) -> float:
    r"""Inherent flow characteristic of a control valve, the fraction of full capacity.

    .. math::
        f(x) = x \;\text{(linear)}, \qquad
        f(x) = R^{\,x - 1}\ (x > 0),\; f(0) = 0 \;\text{(equal percentage)},
        \qquad x = \text{opening}/100

    Parameters
    ----------
    opening_pct : float
        Valve travel, 0 (closed) to 100 (fully open) [%]
    characteristic : str
        ``"linear"`` or ``"equal_percentage"``
    rangeability : float, optional
        Inherent rangeability R of an equal-percentage valve, > 1 [-]

    Returns
    -------
    f : float
        Flow coefficient at this opening over the full-open coefficient, Cv(x)/Cv(1) [-]

    Notes
    -----
    An opening outside 0-100 %, NaN, an unknown characteristic, or a rangeability that is
    not a finite number above 1 raises ``ValueError``. The equal-percentage curve does not
    reach zero as x -> 0 (it tends to 1/R): a real valve closes from there, which is why
    the closed valve is taken as exactly 0. ``fluids.control_valve.Cv_char_equal_percentage``
    is a spline of tabulated data, not this formula, and is not used.

    Examples
    --------
    >>> valve_flow_fraction(50.0, "linear")
    0.5
    >>> round(valve_flow_fraction(50.0, "equal_percentage"), 4)
    0.1414

    References
    ----------
    .. [1] IEC 60534-1 / ISA-75 terminology for inherent characteristics (see module
       references); the formulas are textbook.
    """
    x_pct = float(opening_pct)
    if math.isnan(x_pct) or not 0.0 <= x_pct <= 100.0:
        raise ValueError(f"opening_pct={opening_pct!r} is outside 0-100 %")
    if characteristic not in VALVE_CHARACTERISTICS:
        raise ValueError(
            f"unknown valve characteristic {characteristic!r}; expected one of "
            f"{', '.join(VALVE_CHARACTERISTICS)}"
        )
    x = x_pct / 100.0
    if characteristic == "linear":
        return x
    r = float(rangeability)
    if not math.isfinite(r) or r <= 1.0:
        raise ValueError(f"rangeability={rangeability!r} must be a finite number above 1")
    if x == 0.0:
        return 0.0
    return r ** (x - 1.0)


def valve_loss_coefficient(
    opening_pct: float,
    *,
    diameter_m: float,
    characteristic: str,
    rangeability: float = 50.0,
    cv_full: float | None = None,
    kv_full: float | None = None,
    k_full: float | None = None,
) -> float:
    r"""Resistance coefficient K of a control valve at a given opening.

    .. math::
        C_v(x) = C_{v,\text{full}}\,f(x), \qquad K(x) = \frac{K_\text{full}}{f(x)^2},
        \qquad K_\text{full} = 1.6\times10^9\,\frac{D^4}{K_v^2}

    with :math:`K_v = 0.865\,C_v` (IEC 60534-2-1); the conversions are
    ``fluids.fittings.Cv_to_K`` and ``fluids.fittings.Kv_to_K``.

    Parameters
    ----------
    opening_pct : float
        Valve travel, 0-100 [%]
    diameter_m : float
        Inside diameter of the pipe the K refers to (head loss = K·V²/2g with V the
        velocity in that pipe) [m]
    characteristic : str
        ``"linear"`` or ``"equal_percentage"``, see :func:`valve_flow_fraction`
    rangeability : float, optional
        Inherent rangeability of an equal-percentage valve [-]
    cv_full : float, optional
        Flow coefficient fully open, US units [US gal/min at 1 psi]
    kv_full : float, optional
        Flow coefficient fully open, metric [m³/h at 1 bar]
    k_full : float, optional
        Resistance coefficient fully open [-]

    Returns
    -------
    K : float
        Resistance coefficient at this opening [-]; ``math.inf`` when closed

    Notes
    -----
    Exactly one of ``cv_full``, ``kv_full``, ``k_full`` must be given, positive and finite;
    otherwise ``ValueError``. Valid for incompressible, non-cavitating, non-choked liquid
    flow, the regime of a low-head auxiliary-water valve.

    Examples
    --------
    >>> round(valve_loss_coefficient(100.0, diameter_m=0.5, characteristic="linear",
    ...                              kv_full=10000.0), 3)
    1.0
    >>> round(valve_loss_coefficient(50.0, diameter_m=0.5, characteristic="linear",
    ...                              k_full=0.2), 3)
    0.8

    References
    ----------
    .. [1] IEC 60534-1 and IEC 60534-2-1 / ANSI/ISA-75.01.01 (see module references).
    """
    given = {name: v for name, v in
             (("cv_full", cv_full), ("kv_full", kv_full), ("k_full", k_full)) if v is not None}
    if len(given) != 1:
        raise ValueError(
            "give exactly one of cv_full, kv_full, k_full "
            f"(got {', '.join(given) if given else 'none'})"
        )
    (name, value), = given.items()
    value = _finite(value, name)
    if value <= 0.0:
        raise ValueError(f"{name}={value!r} must be positive")
    d = _finite(diameter_m, "diameter_m")
    if d <= 0.0:
        raise ValueError(f"diameter_m={diameter_m!r} must be positive")
    if name == "cv_full":
        k_open = Cv_to_K(value, d)
    elif name == "kv_full":
        k_open = Kv_to_K(value, d)
    else:
        k_open = value
    f = valve_flow_fraction(opening_pct, characteristic, rangeability)
    if f == 0.0:
        return math.inf
    return k_open / f**2


# --------------------------------------------------------------------------- conduits
def _conduit_terms(*, diameter_m: float, length_m: float, roughness_m: float,
                   minor_k: float, valve_k: float, temperature_c: float):
    """Validate conduit inputs; return (D, L, ε/D, ΣK incl. exit, ν [m²/s])."""
    d = _finite(diameter_m, "diameter_m")
    length = _finite(length_m, "length_m")
    eps = _finite(roughness_m, "roughness_m")
    k_minor = _finite(minor_k, "minor_k")
    if d <= 0.0:
        raise ValueError(f"diameter_m={diameter_m!r} must be positive")
    if length <= 0.0:
        raise ValueError(f"length_m={length_m!r} must be positive")
    if eps < 0.0 or eps / d > RELATIVE_ROUGHNESS_MAX:
        raise ValueError(
            f"relative roughness {eps / d:g} is outside 0-{RELATIVE_ROUGHNESS_MAX:g} "
            "(the range of the Colebrook equation / Moody chart)"
        )
    if k_minor < 0.0:
        raise ValueError(f"minor_k={minor_k!r} must not be negative")
    kv = float(valve_k)
    if math.isnan(kv) or kv < 0.0:
        raise ValueError(f"valve_k={valve_k!r} must be a non-negative number (inf = closed)")
    nu = water_viscosity(temperature_c) / water_density(temperature_c)
    return d, length, eps / d, k_minor + kv + EXIT_LOSS_K, nu


def _check_reynolds(re: float) -> None:
    if re > REYNOLDS_MAX:
        raise ValueError(f"Reynolds number {re:.3g} is above {REYNOLDS_MAX:g}, "
                         "outside the Colebrook equation / Moody chart")


def _head_from_velocity(v: float, *, d: float, length: float, rel_rough: float,
                        k_total: float, nu: float) -> float:
    if v == 0.0:
        return 0.0
    f = friction_factor(Re=v * d / nu, eD=rel_rough, Method="Colebrook")
    return (f * length / d + k_total) * v * v / (2.0 * G_M_S2)


def conduit_head_loss(
    flow_m3s: float,
    *,
    diameter_m: float,
    length_m: float,
    roughness_m: float,
    minor_k: float = 0.0,
    valve_k: float = 0.0,
    temperature_c: float = 10.0,
) -> float:
    r"""Head needed to drive a flow through a full-flowing conduit (Darcy-Weisbach).

    .. math::
        \Delta H = \left(f\frac{L}{D} + \sum K + K_\text{valve} + 1\right)\frac{V^2}{2g},
        \qquad V = \frac{4Q}{\pi D^2}, \qquad Re = \frac{V D \rho}{\mu}

    with f from Colebrook (1939) via ``fluids.friction.friction_factor`` (64/Re below
    Re = 2040) and ρ, μ from :mod:`ops_logic.properties`; the 1 is the exit loss.

    Parameters
    ----------
    flow_m3s : float
        Flow through the conduit, >= 0 [m³/s]
    diameter_m : float
        Inside diameter [m]
    length_m : float
        Length [m]
    roughness_m : float
        Equivalent sand roughness ε [m]
    minor_k : float, optional
        Sum of the minor-loss coefficients (entrance, bends, gates) [-]
    valve_k : float, optional
        Valve loss coefficient from :func:`valve_loss_coefficient`; ``inf`` = closed [-]
    temperature_c : float, optional
        Water temperature, 0-40 °C [°C]

    Returns
    -------
    head_m : float
        Difference of water levels (pool to pool) needed for that flow [m];
        ``math.inf`` for a positive flow through a closed valve

    Notes
    -----
    Raises ``ValueError`` for a negative or NaN flow, ε/D outside 0-0.05, Re above 1e8,
    or a temperature outside 0-40 °C. Between Re = 2040 and about 4000 the flow is
    transitional and the Colebrook value is common practice, not a prediction.

    Examples
    --------
    >>> round(conduit_head_loss(0.5, diameter_m=0.6, length_m=80.0, roughness_m=1e-4,
    ...                         minor_k=0.5), 3)
    0.548

    References
    ----------
    .. [1] Darcy-Weisbach; Colebrook (1939); Avila et al. (2011) (see module references).
    """
    q = float(flow_m3s)
    if math.isnan(q) or q < 0.0:
        raise ValueError(f"flow_m3s={flow_m3s!r} must be a non-negative number")
    d, length, rel_rough, k_total, nu = _conduit_terms(
        diameter_m=diameter_m, length_m=length_m, roughness_m=roughness_m,
        minor_k=minor_k, valve_k=valve_k, temperature_c=temperature_c)
    if q == 0.0:
        return 0.0
    if math.isinf(k_total):
        return math.inf
    v = q / (math.pi * d * d / 4.0)
    _check_reynolds(v * d / nu)
    return _head_from_velocity(v, d=d, length=length, rel_rough=rel_rough,
                               k_total=k_total, nu=nu)


def conduit_flow(
    head_m: float,
    *,
    diameter_m: float,
    length_m: float,
    roughness_m: float,
    minor_k: float = 0.0,
    valve_k: float = 0.0,
    temperature_c: float = 10.0,
) -> float:
    r"""Steady flow through a full-flowing conduit driven by a difference of water levels.

    Solves for V (``scipy.optimize.brentq``) in

    .. math::
        \Delta H = \left(f(Re)\frac{L}{D} + \sum K + K_\text{valve} + 1\right)\frac{V^2}{2g},
        \qquad Q = V\frac{\pi D^2}{4}

    the inverse of :func:`conduit_head_loss` (same terms, same references).

    Parameters
    ----------
    head_m : float
        Upstream water level minus downstream water level [m]
    diameter_m : float
        Inside diameter [m]
    length_m : float
        Length [m]
    roughness_m : float
        Equivalent sand roughness ε [m]
    minor_k : float, optional
        Sum of the minor-loss coefficients [-]
    valve_k : float, optional
        Valve loss coefficient; ``inf`` = closed [-]
    temperature_c : float, optional
        Water temperature, 0-40 °C [°C]

    Returns
    -------
    flow_m3s : float
        Flow [m³/s]; 0.0 when ``head_m <= 0`` (no reverse flow is modelled) or the valve
        is closed

    Notes
    -----
    Same limits as :func:`conduit_head_loss` (Re above 1e8 raises ``ValueError``). At the
    laminar limit Re = 2040 the friction factor jumps, so heads inside that jump have no
    exact solution and the flow at the jump is returned; auxiliary-water conduits run
    far above it.

    Examples
    --------
    >>> kw = dict(diameter_m=0.6, length_m=80.0, roughness_m=1e-4, minor_k=0.5)
    >>> round(conduit_flow(1.0, **kw), 3)
    0.679
    >>> round(conduit_flow(conduit_head_loss(0.5, **kw), **kw), 9)
    0.5

    References
    ----------
    .. [1] Darcy-Weisbach; Colebrook (1939) (see module references).
    """
    h = float(head_m)
    if math.isnan(h):
        raise ValueError("head_m is NaN")
    d, length, rel_rough, k_total, nu = _conduit_terms(
        diameter_m=diameter_m, length_m=length_m, roughness_m=roughness_m,
        minor_k=minor_k, valve_k=valve_k, temperature_c=temperature_c)
    if h <= 0.0 or math.isinf(k_total):
        return 0.0

    def residual(v: float) -> float:
        head = _head_from_velocity(v, d=d, length=length, rel_rough=rel_rough,
                                   k_total=k_total, nu=nu)
        return head - h

    # Friction only adds to the minor losses, so the velocity is below sqrt(2 g h / ΣK).
    v_max = math.sqrt(2.0 * G_M_S2 * h / k_total)
    v = brentq(residual, 0.0, v_max, xtol=1e-12, rtol=1e-12)
    _check_reynolds(v * d / nu)
    return v * math.pi * d * d / 4.0


# --------------------------------------------------------------------------- pumps
@dataclass(frozen=True)
class PumpCurve:
    """Head-flow curve of one pump at fixed speed; build it with a ``from_*`` method.

    A ``"table"`` curve interpolates linearly between tabulated points and is not
    extrapolated; a ``"quadratic"`` curve is H = H0 - (H0 - Hr)(Q/Qr)^2 between shutoff and
    runout (H = 0). Heads and flows are per pump [m, m³/s].
    """

    kind: Literal["table", "quadratic"]
    flows_m3s: tuple[float, ...] = ()
    heads_m: tuple[float, ...] = ()
    rated_flow_m3s: float | None = None
    rated_head_m: float | None = None
    shutoff_head_m: float | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "flows_m3s", tuple(float(v) for v in self.flows_m3s))
        object.__setattr__(self, "heads_m", tuple(float(v) for v in self.heads_m))
        if self.kind == "table":
            q = np.asarray(self.flows_m3s, dtype=float)
            h = np.asarray(self.heads_m, dtype=float)
            if q.ndim != 1 or q.shape != h.shape or q.size < 2:
                raise ValueError("a tabulated pump curve needs at least two (head, flow) points")
            if not (np.isfinite(q).all() and np.isfinite(h).all()):
                raise ValueError("pump curve points must be finite numbers")
            if (q < 0.0).any() or (h < 0.0).any():
                raise ValueError("pump curve heads and flows must not be negative")
            if not (np.diff(q) > 0.0).all():
                raise ValueError("pump curve flows must be distinct")
            if not (np.diff(h) < 0.0).all():
                raise ValueError(
                    "pump curve head must fall strictly as flow rises (a drooping or flat "
                    "curve has no unique operating point)"
                )
        elif self.kind == "quadratic":
            qr, hr, h0 = self.rated_flow_m3s, self.rated_head_m, self.shutoff_head_m
            if qr is None or hr is None or h0 is None:
                raise ValueError("a quadratic pump curve needs rated flow, rated head, shutoff")
            qr, hr, h0 = (_finite(qr, "rated_flow_m3s"), _finite(hr, "rated_head_m"),
                          _finite(h0, "shutoff_head_m"))
            if qr <= 0.0 or hr <= 0.0:
                raise ValueError("rated flow and rated head must be positive")
            if h0 <= hr:
                raise ValueError(
                    f"shutoff_head_m={h0!r} must be above rated_head_m={hr!r}")
        else:
            raise ValueError(f"unknown pump curve kind {self.kind!r}")

    @classmethod
    def from_points(cls, points: Sequence[tuple[float, float]]) -> PumpCurve:
        """Tabulated curve from ``(head_m, flow_m3s)`` pairs, in any order of flow.

        Head must fall strictly as flow rises; include the zero-flow (shutoff) point if
        the curve is to be used near shutoff.

        >>> c = PumpCurve.from_points([(10.0, 0.0), (8.0, 0.5), (5.0, 1.0)])
        >>> c.flow_at_head(8.0)
        0.5
        """
        pts = sorted(((float(f), float(h)) for h, f in points))
        return cls(kind="table", flows_m3s=tuple(p[0] for p in pts),
                   heads_m=tuple(p[1] for p in pts))

    @classmethod
    def from_rated(cls, rated_flow_m3s: float, rated_head_m: float,
                   shutoff_head_m: float | None = None) -> PumpCurve:
        """Quadratic curve through the rated point: H = H0 - (H0 - Hr)(Q/Qr)^2.

        If ``shutoff_head_m`` is not given, H0 = 1.25·Hr is ASSUMED: a value typical of
        radial-flow (centrifugal) pumps, not a published constant. A real site should
        enter the manufacturer's curve with :meth:`from_points`.

        >>> PumpCurve.from_rated(0.5, 8.0).head_at_flow(0.0)
        10.0
        """
        h0 = 1.25 * float(rated_head_m) if shutoff_head_m is None else float(shutoff_head_m)
        return cls(kind="quadratic", rated_flow_m3s=float(rated_flow_m3s),
                   rated_head_m=float(rated_head_m), shutoff_head_m=h0)

    # -- extent of the curve
    @property
    def min_flow_m3s(self) -> float:
        """Lowest flow on the curve [m³/s]."""
        return self.flows_m3s[0] if self.kind == "table" else 0.0

    @property
    def max_flow_m3s(self) -> float:
        """Highest flow on the curve (last tabulated point, or runout at H = 0) [m³/s]."""
        if self.kind == "table":
            return self.flows_m3s[-1]
        h0, hr, qr = self._quadratic()
        return qr * math.sqrt(h0 / (h0 - hr))

    @property
    def max_head_m(self) -> float:
        """Head at the lowest flow on the curve [m]."""
        return self.heads_m[0] if self.kind == "table" else self._quadratic()[0]

    @property
    def min_head_m(self) -> float:
        """Head at the highest flow on the curve [m]."""
        return self.heads_m[-1] if self.kind == "table" else 0.0

    def _quadratic(self) -> tuple[float, float, float]:
        assert self.shutoff_head_m is not None and self.rated_head_m is not None
        assert self.rated_flow_m3s is not None
        return self.shutoff_head_m, self.rated_head_m, self.rated_flow_m3s

    def head_at_flow(self, flow_m3s: float) -> float:
        """Pump head at a flow [m]; a flow off the curve raises ValueError.

        >>> round(PumpCurve.from_rated(0.5, 8.0, 10.0).head_at_flow(0.5), 6)
        8.0
        """
        q = float(flow_m3s)
        if math.isnan(q) or not self.min_flow_m3s <= q <= self.max_flow_m3s:
            raise ValueError(
                f"flow_m3s={flow_m3s!r} is outside the pump curve "
                f"({self.min_flow_m3s:g}-{self.max_flow_m3s:g} m³/s)"
            )
        if self.kind == "table":
            return float(np.interp(q, self.flows_m3s, self.heads_m))
        h0, hr, qr = self._quadratic()
        return h0 - (h0 - hr) * (q / qr) ** 2

    def flow_at_head(self, head_m: float) -> float:
        """Pump flow at a head [m³/s]: 0 at or above shutoff; below the curve raises.

        >>> round(PumpCurve.from_rated(0.5, 8.0, 10.0).flow_at_head(8.0), 6)
        0.5
        """
        h = float(head_m)
        if math.isnan(h):
            raise ValueError("head_m is NaN")
        shutoff_known = self.min_flow_m3s == 0.0
        if shutoff_known and h >= self.max_head_m:
            return 0.0
        if h > self.max_head_m:
            raise ValueError(
                f"head_m={h:g} is above the highest tabulated head {self.max_head_m:g} m "
                "and the curve has no zero-flow (shutoff) point"
            )
        if h < self.min_head_m:
            raise ValueError(
                f"head_m={h:g} is below the lowest head on the pump curve "
                f"{self.min_head_m:g} m (outside the curve; not extrapolated)"
            )
        if self.kind == "table":
            return float(np.interp(h, self.heads_m[::-1], self.flows_m3s[::-1]))
        h0, hr, qr = self._quadratic()
        return qr * math.sqrt((h0 - h) / (h0 - hr))


def pump_station_flow(curve: PumpCurve, pumps_running: int, static_head_m: float, *,
                      loss_k_s2_m5: float = 0.0) -> float:
    r"""Total flow of n identical pumps in parallel against a static lift and a pipe loss.

    Each pump delivers q at the common head; solves (``scipy.optimize.brentq``)

    .. math::
        H_\text{pump}(q) = H_\text{static} + k\,(n q)^2, \qquad Q = n q

    Parameters
    ----------
    curve : PumpCurve
        Curve of one pump
    pumps_running : int
        Number of pumps running, >= 0 [-]
    static_head_m : float
        Delivery level minus source level; negative when the pool is below the source [m]
    loss_k_s2_m5 : float, optional
        System loss coefficient k of the shared piping, head loss = k·Q² [s²/m⁵]

    Returns
    -------
    flow_m3s : float
        Total delivered flow [m³/s]; 0.0 with no pump running or when the static head is at
        or above the shutoff head

    Notes
    -----
    The operating point must lie on the curve: a system head below the curve's lowest
    head (past its last point or runout), or below its lowest tabulated flow when the
    table has no shutoff point, raises ``ValueError``. Check valves are assumed, so a
    pump that cannot lift delivers nothing (no reverse flow).

    Examples
    --------
    >>> curve = PumpCurve.from_rated(0.5, 8.0, 10.0)
    >>> round(pump_station_flow(curve, 2, 8.0), 6)
    1.0

    References
    ----------
    .. [1] Parallel-pump operating point: the textbook construction of adding the flows
       of the pump curves at equal head and intersecting with the system curve, e.g.
       Karassik et al., Pump Handbook (from memory).
    """
    if isinstance(pumps_running, bool) or int(pumps_running) != pumps_running:
        raise ValueError(f"pumps_running={pumps_running!r} must be a whole number")
    n = int(pumps_running)
    if n < 0:
        raise ValueError(f"pumps_running={pumps_running!r} must not be negative")
    hs = _finite(static_head_m, "static_head_m")
    k = _finite(loss_k_s2_m5, "loss_k_s2_m5")
    if k < 0.0:
        raise ValueError(f"loss_k_s2_m5={loss_k_s2_m5!r} must not be negative")
    if n == 0:
        return 0.0

    def residual(q: float) -> float:
        return curve.head_at_flow(q) - hs - k * (n * q) ** 2

    q_lo, q_hi = curve.min_flow_m3s, curve.max_flow_m3s
    r_lo = residual(q_lo)
    if r_lo <= 0.0 and q_lo == 0.0:
        return 0.0
    if r_lo == 0.0:
        return n * q_lo
    if r_lo < 0.0:
        raise ValueError(
            f"operating point is below the lowest tabulated flow {q_lo:g} m³/s per pump "
            "(the curve has no shutoff point there)"
        )
    r_hi = residual(q_hi)
    if r_hi > 0.0:
        raise ValueError(
            f"operating point is beyond the end of the pump curve ({q_hi:g} m³/s per pump at "
            f"{curve.min_head_m:g} m): system head too low for the curve, not extrapolated"
        )
    q = q_hi if r_hi == 0.0 else brentq(residual, q_lo, q_hi, xtol=1e-14, rtol=1e-12)
    return n * q
