"""The invented demo service: latent drivers and the KPIs computed from them.

Scenario (fictional): *Larkspur Pay*, a card-payment gateway run as a small cluster of API
nodes. One step is 5 minutes. Each node's KPIs follow five latent drivers:

* ``load``      customer traffic, with daily and weekly seasonality and slow random wander;
* ``capacity``  the node's effective capacity (autoscaling, noisy neighbours), slowly varying;
* ``cache``     token-cache health (hit ratio), slowly varying, a little worse under load;
* ``upstream``  response time of the card networks the gateway calls;
* ``batch``     the nightly settlement job (a bump around 01:30 each night).

KPIs that hang on the same drivers through monotone maps stay correlated at any time of day;
:data:`PAIRS` lists the designated pairs.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

STEP_MINUTES = 5
STEPS_PER_DAY = 24 * 60 // STEP_MINUTES
STEPS_PER_WEEK = 7 * STEPS_PER_DAY
_BURN_IN = 600


@dataclass(frozen=True)
class Drivers:
    """The latent state of one node over the whole timeline, each a ``(T,)`` array."""

    load: np.ndarray
    capacity: np.ndarray
    cache: np.ndarray
    upstream: np.ndarray
    batch: np.ndarray

    def take(self, steps: np.ndarray) -> Drivers:
        """The drivers at the given step indices (a 1-D index array)."""
        return Drivers(*(getattr(self, f)[steps] for f in self.__dataclass_fields__))


def _ar1(rng: np.random.Generator, n: int, phi: float, sd: float) -> np.ndarray:
    """Stationary AR(1) with coefficient ``phi`` and marginal standard deviation ``sd``."""
    shocks = rng.standard_normal(n + _BURN_IN) * sd * np.sqrt(1.0 - phi * phi)
    from scipy.signal import lfilter  # imported here: scipy.signal takes ~1 s to import

    return lfilter([1.0], [1.0, -phi], shocks)[_BURN_IN:]


def make_drivers(rng: np.random.Generator, n_steps: int) -> Drivers:
    """Draw one node's drivers; the timeline starts on a Monday at 00:00."""
    t = np.arange(n_steps, dtype=np.float64)
    day = t / STEPS_PER_DAY
    daily = 1.0 + 0.55 * np.sin(2 * np.pi * (day - 0.30)) + 0.12 * np.sin(4 * np.pi * (day - 0.05))
    weekly = 1.0 + 0.15 * np.cos(2 * np.pi * (t / STEPS_PER_WEEK - 0.35))
    node_scale = rng.uniform(0.8, 1.2)
    load = node_scale * daily * weekly * np.exp(_ar1(rng, n_steps, 0.985, 0.06))
    capacity = rng.uniform(0.9, 1.1) * np.exp(_ar1(rng, n_steps, 0.998, 0.02))
    cache = np.clip(0.93 + _ar1(rng, n_steps, 0.995, 0.012) - 0.02 * (load - 1.0), 0.5, 0.995)
    upstream = 85.0 * (1.0 + 0.1 * np.sin(2 * np.pi * (day - 0.35)))
    upstream = upstream * np.exp(_ar1(rng, n_steps, 0.97, 0.08))
    hours_from_batch = (day % 1.0 - 1.5 / 24.0) * 24.0
    hours_from_batch = (hours_from_batch + 12.0) % 24.0 - 12.0
    batch = np.exp(-0.5 * (hours_from_batch / 0.75) ** 2)
    return Drivers(load, capacity, cache, upstream, batch)


def _kpi_table(v: Drivers) -> dict[str, np.ndarray]:
    """Clean KPI values by name, in catalogue order."""
    util = np.clip(0.42 * v.load / v.capacity, 0.02, 0.98)
    requests = 420.0 * v.load
    errors = 0.15 + 2.5 * np.maximum(util - 0.6, 0.0) ** 1.5 + 0.002 * v.upstream
    return {
        "requests_per_s": requests,
        "payments_authorized_per_s": 0.94 * requests * (1.0 - 0.02 * (v.upstream / 85.0 - 1.0)),
        "cpu_util_pct": 6.0 + 90.0 * util,
        "worker_threads_busy": 64.0 * util,
        "p50_latency_ms": 18.0 + 30.0 * util**2 + 0.25 * v.upstream,
        "p99_latency_ms": 55.0 + 160.0 * util**3 + 0.9 * v.upstream,
        "net_in_mbps": 60.0 * v.load + 4.0,
        "cache_hit_ratio": v.cache,
        "db_queries_per_s": requests * (0.35 + 6.0 * (1.0 - v.cache)),
        "upstream_latency_ms": v.upstream,
        "net_out_mbps": 38.0 * v.load + 3.0 + 25.0 * v.batch,
        "open_connections": 900.0 * v.load**0.9 + 50.0,
        "error_rate_pct": errors,
        "memory_used_gb": 5.5 + 1.2 * util + 0.6 * v.batch,
        "gc_pause_ms": 4.0 + 12.0 * util**2,
        "queue_depth": 3.0 + 40.0 * util**4,
        "disk_write_mbps": 6.0 + 55.0 * v.batch + 4.0 * v.load,
        "tls_handshakes_per_s": 35.0 * v.load,
        "retries_per_s": 3.0 * requests * errors / 100.0 + 0.3,
        "fraud_checks_per_s": 0.3 * requests + 8.0 * v.batch,
    }


# (multiplicative noise sd, additive noise sd, upper bound) per KPI, in catalogue order
_NOISE = {
    "requests_per_s": (0.02, 3.0, np.inf),
    "payments_authorized_per_s": (0.02, 3.0, np.inf),
    "cpu_util_pct": (0.02, 1.0, 100.0),
    "worker_threads_busy": (0.03, 1.0, 64.0),
    "p50_latency_ms": (0.02, 0.4, np.inf),
    "p99_latency_ms": (0.03, 1.5, np.inf),
    "net_in_mbps": (0.02, 0.6, np.inf),
    "cache_hit_ratio": (0.0, 0.004, 1.0),
    "db_queries_per_s": (0.03, 4.0, np.inf),
    "upstream_latency_ms": (0.03, 1.0, np.inf),
    "net_out_mbps": (0.03, 0.5, np.inf),
    "open_connections": (0.02, 8.0, np.inf),
    "error_rate_pct": (0.1, 0.02, 100.0),
    "memory_used_gb": (0.01, 0.03, np.inf),
    "gc_pause_ms": (0.08, 0.3, np.inf),
    "queue_depth": (0.1, 0.5, np.inf),
    "disk_write_mbps": (0.05, 0.5, np.inf),
    "tls_handshakes_per_s": (0.04, 1.5, np.inf),
    "retries_per_s": (0.1, 0.1, np.inf),
    "fraud_checks_per_s": (0.03, 1.5, np.inf),
}

KPI_NAMES: tuple[str, ...] = tuple(_NOISE)
MAX_CHANNELS = len(KPI_NAMES)
MIN_CHANNELS = 4

# designated stably correlated pairs (the first four KPIs already hold two of them)
PAIRS: tuple[tuple[str, str], ...] = (
    ("requests_per_s", "payments_authorized_per_s"),
    ("cpu_util_pct", "worker_threads_busy"),
    ("p50_latency_ms", "p99_latency_ms"),
    ("requests_per_s", "net_in_mbps"),
)


def clean_kpis(drivers: Drivers, n_channels: int) -> np.ndarray:
    """The first ``n_channels`` KPIs without noise, ``(T, n_channels)``."""
    table = _kpi_table(drivers)
    return np.column_stack([table[name] for name in KPI_NAMES[:n_channels]])


def noise_draws(rng: np.random.Generator, n_steps: int, n_channels: int) -> np.ndarray:
    """Standard normal draws ``(2, T, n_channels)``: multiplicative and additive parts."""
    return rng.standard_normal((2, n_steps, n_channels))


def add_noise(clean: np.ndarray, draws: np.ndarray) -> np.ndarray:
    """``clean * (1 + m * e1) + a * e2``, then clipped to each KPI's physical range."""
    d = clean.shape[1]
    mult, add = (np.array([_NOISE[n][k] for n in KPI_NAMES[:d]]) for k in range(2))
    return clip_physical(clean * (1.0 + mult * draws[0]) + add * draws[1])


def clip_physical(values: np.ndarray) -> np.ndarray:
    """Clip to ``[0, upper]`` per KPI (rates, sizes and ratios are never negative)."""
    upper = np.array([_NOISE[n][2] for n in KPI_NAMES[: values.shape[1]]])
    return np.clip(values, 0.0, upper)
