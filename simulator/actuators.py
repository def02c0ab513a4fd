"""Actuators of the simulated plant: gates and valves that travel at a rate, pump stations.

Each actuator keeps its whole trajectory since the plant start (breakpoints of a piecewise
linear position, or the steps of a pump count) so that any past instant can be sampled again.
Rates (invented but typical of fishway hardware; "common practice"):

- weir gates (exit and entrance crests): 0.1 ft/s = 0.03048 m/s (:data:`GATE_RATE_M_S`);
- valves: 1 % of travel per second (:data:`VALVE_RATE_PCT_S`);
- pumps start one after another, each :data:`PUMP_START_S` after the previous, and stop
  :data:`PUMP_STOP_S` after the command. A trip stops a running pump at once (or, with none
  running, makes a standby pump unavailable); the tripped pump stays unavailable until it is
  reset, and the station does not start a standby pump by itself.

Times are float seconds since the plant start.
"""

from __future__ import annotations

import numpy as np

from ops_logic.ladder import SettingSpec

__all__ = [
    "GATE_RATE_M_S",
    "PUMP_START_S",
    "PUMP_STOP_S",
    "VALVE_RATE_PCT_S",
    "Growable",
    "LinearActuator",
    "PumpStation",
]

GATE_RATE_M_S = 0.1 * 0.3048
VALVE_RATE_PCT_S = 1.0
PUMP_START_S = 8.0
PUMP_STOP_S = 3.0


class Growable:
    """Rows appended to a numpy array that doubles its capacity (cheap views for sampling).

    >>> g = Growable(2)
    >>> for i in range(5):
    ...     g.append([i, 10 * i])
    >>> g.rows[:, 1].tolist(), len(g)
    ([0.0, 10.0, 20.0, 30.0, 40.0], 5)
    """

    def __init__(self, width: int, capacity: int = 64):
        self._a = np.empty((capacity, width))
        self._n = 0

    def __len__(self) -> int:
        return self._n

    def append(self, row: np.ndarray | list[float]) -> None:
        if self._n == len(self._a):
            self._a = np.concatenate([self._a, np.empty_like(self._a)])
        self._a[self._n] = row
        self._n += 1

    def truncate(self, n: int) -> None:
        self._n = max(min(n, self._n), 0)

    @property
    def rows(self) -> np.ndarray:
        return self._a[: self._n]


class LinearActuator:
    """A gate or valve moving at ``rate`` [unit/s] towards its commanded position."""

    def __init__(self, spec: SettingSpec, position: float, rate: float):
        self.spec = spec
        self.rate = rate
        self.commanded = float(position)
        self._path = Growable(2)
        self._path.append([0.0, float(position)])

    def position(self, t: np.ndarray) -> np.ndarray:
        """Position at each time (linear between breakpoints, held after the last)."""
        rows = self._path.rows
        return np.interp(t, rows[:, 0], rows[:, 1])

    def command(self, t0: float, value: float) -> float:
        """Start moving from wherever it is at ``t0`` to ``value``; return the arrival time.

        A command during travel replaces the rest of the earlier travel.
        """
        p0 = float(self.position(np.array([t0]))[0])
        rows = self._path.rows
        keep = int(np.searchsorted(rows[:, 0], t0, side="right"))
        self._path.truncate(keep)
        if len(self._path) and self._path.rows[-1, 0] == t0:
            self._path.truncate(len(self._path) - 1)
        self._path.append([t0, p0])
        self.commanded = float(value)
        t1 = t0 + abs(value - p0) / self.rate
        if t1 > t0:
            self._path.append([t1, float(value)])
        return t1


class PumpStation:
    """``count`` pumps; the position is the number running. Events are planned by the plant:
    :meth:`command` and :meth:`reset` return the time of the next pump start or stop (with a
    generation number: an event whose generation is stale is ignored)."""

    def __init__(self, spec: SettingSpec, count: int, running: int):
        self.spec = spec
        self.count = count
        self.running = running
        self.commanded = running
        self.tripped = 0
        self.generation = 0
        self._steps = Growable(2)
        self._steps.append([0.0, float(running)])
        self._trips = Growable(2)
        self._trips.append([0.0, 0.0])

    @staticmethod
    def _at(g: Growable, t: np.ndarray) -> np.ndarray:
        rows = g.rows
        return rows[np.maximum(np.searchsorted(rows[:, 0], t, side="right") - 1, 0), 1]

    def position(self, t: np.ndarray) -> np.ndarray:
        """Pumps running at each time."""
        return self._at(self._steps, t)

    def trip_flag(self, t: np.ndarray) -> np.ndarray:
        """1 while at least one pump is tripped, else 0."""
        return (self._at(self._trips, t) > 0).astype(float)

    def _goal(self) -> int:
        return min(self.commanded, self.count - self.tripped)

    def _plan(self, t: float) -> tuple[float, int] | None:
        self.generation += 1
        if self.running < self._goal():
            return t + PUMP_START_S, self.generation
        if self.running > self._goal():
            return t + PUMP_STOP_S, self.generation
        return None

    def command(self, t: float, n: int) -> tuple[float, int] | None:
        self.commanded = int(n)
        return self._plan(t)

    def step(self, t: float, generation: int) -> tuple[bool, tuple[float, int] | None]:
        """A planned start or stop falls due: (position changed, next event)."""
        if generation != self.generation:
            return False, None
        goal = self._goal()
        if self.running < goal:
            self.running += 1
        elif self.running > goal:
            self.running = goal
        else:
            return False, None
        self._record(t)
        return True, self._plan(t)

    def trip(self, t: float) -> bool:
        """One pump trips: a running one if any (it stops at once), else a standby pump (it
        becomes unavailable). True if the number running changed."""
        if self.tripped >= self.count:
            return False
        self.tripped += 1
        self.generation += 1  # a start in progress is abandoned
        stopped = self.running > 0
        if stopped:
            self.running -= 1
        self._record(t)
        return stopped

    def reset(self, t: float) -> tuple[float, int] | None:
        """Clear one trip; the station then restarts pumps up to the command."""
        if self.tripped > 0:
            self.tripped -= 1
            self._trips.append([t, float(self.tripped)])
        return self._plan(t)

    def _record(self, t: float) -> None:
        self._steps.append([t, float(self.running)])
        if self._trips.rows[-1, 1] != self.tripped:
            self._trips.append([t, float(self.tripped)])
