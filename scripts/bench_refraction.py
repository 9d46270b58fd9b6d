#!/usr/bin/env python3
"""Benchmark the ray tracer: numpy RK4 against per-ray scipy ``solve_ivp``, and one sunset.

1. Transfer curves of 3 channels x 7 wavelengths near the horizon (one atmosphere), with
   enough rays that linear interpolation between them is good to 0.1 arcsec (checked
   against a grid four times denser).
2. A sample of the same rays integrated one by one with ``scipy.integrate.solve_ivp``
   (RK45): the same equations in (z, phi, zeta), the same medium tables (the tracer's
   own cell tables), the same stop conditions (the top of the atmosphere, the sea, a
   trapped ray) and the same exit direction (Bouguer's invariant). Its ``rtol`` is tuned
   so that it agrees with the tracer to about 0.05 arcsec; the time per ray is
   extrapolated to the whole curve. Both are also compared with a tight reference
   (DOP853, rtol 1e-12, restarted at every kink so that it never steps across one).
3. One full ``predict_sunset`` after a warm-up call (astropy loaded).

Times are CPU times of this process (the best of a few runs where repeated), so that
other work on the machine does not inflate them. Prints figures; asserts nothing. Run
with the project's venv python.
"""

from __future__ import annotations

import bisect
import math
import time

import numpy as np
from scipy.integrate import solve_ivp

from analyse._raytrace import _Profile
from analyse.atmosphere import linear_layer_atmosphere
from analyse.predict import Conditions, predict_sunset
from analyse.refraction import (
    make_medium,
    trace_rays,
    transfer_curve,
)
from calibration.bands import default_bands

LAPSE_RATE_K_PER_KM = 6.5
EYE_HEIGHT_M = 10.0
TEMPERATURE_C = 15.0
SPAN_ARCMIN = 45.0
TARGET_ARCSEC = 0.05  # agreement asked of solve_ivp with the tracer
SAMPLE_RAYS = 24


class _ScalarProfile:
    """The tracer's cell tables of one row, read one height at a time."""

    def __init__(self, prof: _Profile, row: int) -> None:
        k = slice(row * prof.cells, (row + 1) * prof.cells)
        self.bounds = prof.z_inner.tolist()
        self.ga, self.gb = prof.ga[k].tolist(), prof.gb[k].tolist()

    def gradient(self, z: float, lo: float = -math.inf, hi: float = math.inf) -> float:
        i = bisect.bisect_right(self.bounds, min(max(z, lo), hi))
        return self.ga[i] + self.gb[i] * z


def _exit_altitude_deg(medium, c0: float, z: float, phi: float, zeta: float) -> float:
    sin_vac = min(c0 / (medium.earth_radius_m + z), 1.0)
    zeta_vac = math.asin(sin_vac) if math.cos(zeta) >= 0 else math.pi - math.asin(sin_vac)
    return 90.0 - math.degrees(zeta_vac + phi)


def _event(fn, direction: float):
    fn.terminal, fn.direction = True, direction
    return fn


def solve_ivp_ray(medium, prof: _Profile, elevation_deg: float, row: int, rtol: float,
                  method: str = "RK45", pieces: bool = False) -> tuple[float, int]:
    """True altitude [deg] of one ray and the number of right-hand-side calls.

    Stops at the top (exit direction from Bouguer's invariant), at the sea or after
    ``phi`` = 0.5 rad (NaN for both), like the tracer. ``pieces``: restart at every kink
    and read the table on the current layer's side of it, so that no step crosses one.
    """
    radius, h = medium.earth_radius_m, medium.eye_height_m
    sp = _ScalarProfile(prof, row)
    c0 = math.exp(float(np.interp(h, medium.height_m, medium.ln_n[row]))) * (radius + h) \
        * math.cos(math.radians(elevation_deg))
    y = np.array([h, 0.0, math.radians(90.0 - elevation_deg)])
    kinks = [-math.inf] + ([k for k in prof.land if k < medium.top_m] if pieces else []) \
        + [math.inf]
    layer = bisect.bisect_right(kinks, h) - 1
    if elevation_deg < 0.0 and kinks[layer] == h:
        layer -= 1
    top_m = medium.top_m
    calls, s0 = 0, 0.0
    while True:
        lo, hi = kinks[layer], kinks[layer + 1]

        def rhs(s, yy, lo=lo + 1e-6, hi=hi - 1e-6):
            z, _, zeta = yy
            inv_r = 1.0 / (radius + z)
            sz = math.sin(zeta)
            return [math.cos(zeta), sz * inv_r, -sz * (inv_r + sp.gradient(z, lo, hi))]

        events = [_event(lambda s, yy: yy[0] - top_m, 1.0),  # 0: out at the top
                  _event(lambda s, yy: yy[0], -1.0),  # 1: the sea
                  _event(lambda s, yy: yy[1] - 0.5, 1.0)]  # 2: trapped
        if pieces:
            events += [_event(lambda s, yy, b=lo: yy[0] - b, -1.0),  # 3: down through a kink
                       _event(lambda s, yy, b=hi: yy[0] - b, 1.0)]  # 4: up through a kink
        sol = solve_ivp(rhs, (s0, 4e6), y, method=method, rtol=rtol,
                        atol=[1e-9, 1e-13, 1e-13], events=events)
        calls += sol.nfev
        y, s0 = sol.y[:, -1].copy(), sol.t[-1]
        hit = [i for i, t in enumerate(sol.t_events) if len(t)]
        if hit and hit[0] == 0:
            return _exit_altitude_deg(medium, c0, *y), calls
        if not hit or hit[0] in (1, 2):
            return math.nan, calls
        layer += 1 if hit[0] == 4 else -1  # through a kink: on into the next layer
        y[0] = hi if hit[0] == 4 else lo


def _best_of(fn, repeats: int = 5) -> float:
    """Shortest CPU time [s] of a few calls (CPU time: other processes may share the machine)."""
    times = []
    for _ in range(repeats):
        t = time.process_time()
        fn()
        times.append(time.process_time() - t)
    return min(times)


def _curve_resolution(medium, rays: int) -> float:
    """Largest difference [arcsec] between the curve with ``rays`` and one 4x denser."""
    coarse = transfer_curve(medium, span_arcmin=SPAN_ARCMIN, rays=rays)
    dense = transfer_curve(medium, span_arcmin=SPAN_ARCMIN, rays=4 * rays,
                           horizon=coarse.horizon)
    worst = 0.0
    for k in range(medium.wavelength_nm.size):
        e = dense.apparent_elevation_deg[k]
        worst = max(worst, float(np.nanmax(np.abs(coarse.true_altitude_at(k, e)
                                                  - dense.true_altitude_deg[k]))))
    return 3600.0 * worst


def _tune_solve_ivp(medium, prof, elev, rows, ours, truth, pieces: bool):
    """Loosest rtol (and its time a ray [s]) at which solve_ivp agrees with the tracer."""
    print(f"solve_ivp RK45, {'restarted at kinks' if pieces else 'plain'}:")
    for rtol in (1e-4, 1e-5, 1e-6, 1e-7, 3e-8, 1e-8, 3e-9, 1e-9, 3e-10, 1e-10):
        t = time.process_time()
        res = [solve_ivp_ray(medium, prof, e, r, rtol, pieces=pieces) for e, r in zip(elev, rows)]
        per_ray = (time.process_time() - t) / len(elev)
        alt = np.array([a for a, _ in res])
        diff = 3600.0 * np.max(np.abs(alt - ours))
        err = 3600.0 * np.max(np.abs(alt - truth))
        calls = np.mean([c for _, c in res])
        print(f"  rtol {rtol:.0e}: {1e3 * per_ray:6.2f} ms a ray, {calls:6.0f} calls; "
              f"vs tracer {diff:.4f}\", vs reference {err:.4f}\"")
        if diff <= TARGET_ARCSEC:
            return rtol, per_ray
    return None


def main() -> None:
    bands = default_bands()
    lam = np.concatenate([b.wavelength_nm for b in bands.values()])
    atm = linear_layer_atmosphere(LAPSE_RATE_K_PER_KM, eye_height_m=EYE_HEIGHT_M,
                                  temperature_C=TEMPERATURE_C)
    medium = make_medium(atm, lam)
    print(f"atmosphere: {atm.description}; eye {EYE_HEIGHT_M:g} m; {lam.size} wavelengths "
          f"({len(bands)} channels x {lam.size // len(bands)})")

    rays = 24
    while _curve_resolution(medium, rays) > 0.1:
        rays *= 2
    print(f"rays per wavelength for 0.1\" interpolation over {SPAN_ARCMIN:g}': {rays} "
          f"(interpolation error {_curve_resolution(medium, rays):.3f}\" against {4 * rays})")
    curve = transfer_curve(medium, span_arcmin=SPAN_ARCMIN, rays=rays)
    t_ours = _best_of(lambda: transfer_curve(medium, span_arcmin=SPAN_ARCMIN, rays=rays))
    n_rays = lam.size * rays
    print(f"numpy RK4 tracer: {1e3 * t_ours:.1f} ms for {n_rays} rays "
          f"({1e6 * t_ours / n_rays:.1f} us a ray, sea-horizon rays included)")

    rng = np.random.default_rng(1)
    pick_row = rng.integers(0, lam.size, SAMPLE_RAYS)
    pick_col = rng.integers(1, rays, SAMPLE_RAYS)
    elev = curve.apparent_elevation_deg[pick_row, pick_col]
    ours = trace_rays(medium, elev, pick_row).true_altitude_deg
    prof = _Profile(medium)
    truth = np.array([solve_ivp_ray(medium, prof, e, r, 1e-12, "DOP853", pieces=True)[0]
                      for e, r in zip(elev, pick_row)])
    print(f"tracer vs tight reference (DOP853 rtol 1e-12, restarted at kinks), "
          f"{SAMPLE_RAYS} rays: max {3600 * np.max(np.abs(ours - truth)):.4f}\"")

    for label, pieces in (("plain", False), ("restarted at kinks", True)):
        chosen = _tune_solve_ivp(medium, prof, elev, pick_row, ours, truth, pieces)
        if chosen is None:
            print(f"solve_ivp ({label}) never reached {TARGET_ARCSEC}\" agreement")
            continue
        rtol, per_ray = chosen
        print(f"speed ratio against solve_ivp {label} (rtol {rtol:.0e}, {1e3 * per_ray:.2f} ms "
              f"a ray x {n_rays} rays = {per_ray * n_rays:.2f} s): "
              f"{per_ray * n_rays / t_ours:.0f}x (target >= 30x)")

    cond = Conditions(latitude_deg=35.0, longitude_deg=0.0, eye_height_m=EYE_HEIGHT_M,
                      temperature_C=TEMPERATURE_C, pressure_hPa=1013.25,
                      relative_humidity=0.0)
    t = time.process_time()
    predict_sunset(cond, "2026-03-20", LAPSE_RATE_K_PER_KM)
    cold = time.process_time() - t
    warm = _best_of(lambda: predict_sunset(cond, "2026-03-20", LAPSE_RATE_K_PER_KM), 3)
    print(f"predict_sunset: {cold:.2f} s first call (astropy loading), {warm:.3f} s warm "
          f"(target < 0.5 s)")


if __name__ == "__main__":
    main()
