"""The ``limbtrace`` command line: argument parsing, terminal output and exit codes.

Exit status (FOLDER-FORMAT.md): 0 when the analysis ran, 2 for bad input (one line on
stderr naming the file and the problem), 1 for a bug. Stages raise
:class:`~analyse.errors.InputError` for bad input; nothing else is caught silently.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import traceback
from collections.abc import Callable, Sequence
from pathlib import Path

from analyse.errors import InputError

__all__ = ["main", "build_parser"]

PROG = "limbtrace"


def _add_common(p: argparse.ArgumentParser, *, writes: bool) -> None:
    p.add_argument("--quiet", action="store_true",
                   help="no progress bars: only the result line and errors")
    if writes:
        p.add_argument("--out", metavar="DIR", type=Path, default=None,
                       help="output folder (default: beside the input folder)")
        p.add_argument("--force", action="store_true",
                       help="replace an existing, non-empty output folder")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every command."""
    parser = argparse.ArgumentParser(
        prog=PROG,
        description="Measure the near-surface lapse rate from recordings of the setting "
        "sun over a sea horizon. Never look at the sun through a viewfinder, binoculars "
        "or a telescope without a proper solar filter; use live view.")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    p = sub.add_parser("predict", help="predict an evening's sunset at a site",
                       description="Ray-trace the evening's sunset at the site of an "
                       "observation.toml: last light per colour channel, green segment, dip "
                       "and horizon refraction.")
    p.add_argument("observation", type=Path, metavar="OBSERVATION.toml")
    p.add_argument("--date", required=True, metavar="YYYY-MM-DD",
                   help="local date of the sunset")
    p.add_argument("--lapse-rate", type=float, default=6.5, metavar="K_PER_KM",
                   help="lapse rate of the near-surface layer, -dT/dz in K/km (default 6.5)")
    p.add_argument("--detection-fraction", type=float, default=None, metavar="F",
                   help="a channel's last light is when its visible flux falls below this "
                   "fraction of the whole disc's (default 1e-4)")
    p.add_argument("--json", action="store_true", help="print JSON (FOLDER-FORMAT.md keys)")
    _add_common(p, writes=False)

    p = sub.add_parser("refraction", help="ray-traced refraction against apparent altitude",
                       description="Ray-trace astronomical refraction for given air at the "
                       "eye and a near-surface lapse rate.")
    p.add_argument("--temperature-C", type=float, default=10.0, metavar="T")
    p.add_argument("--pressure-hPa", type=float, default=1010.0, metavar="P")
    p.add_argument("--humidity", type=float, default=0.0, metavar="RH",
                   help="relative humidity, 0..1 (default 0)")
    p.add_argument("--wavelength-nm", type=float, default=550.0, metavar="L")
    p.add_argument("--eye-height-m", type=float, default=0.0, metavar="H")
    p.add_argument("--lapse-rate", type=float, default=6.5, metavar="K_PER_KM")
    p.add_argument("--layer-top-m", type=float, default=100.0, metavar="M",
                   help="top of the near-surface layer (default 100 m)")
    p.add_argument("--altitudes", default="0,0.5,1,2,3,5,10,20,45,90", metavar="A1,A2,...",
                   help="apparent altitudes in degrees, comma-separated")
    p.add_argument("--json", action="store_true", help="print JSON (FOLDER-FORMAT.md keys)")
    _add_common(p, writes=False)

    p = sub.add_parser("report", help="measure a sunset folder and infer the lapse rate",
                       description="Register every frame to the sea horizon, measure the "
                       "solar upper limb in each colour channel, infer the near-surface lapse "
                       "rate, and write report.html, result.json and frames.ecsv.")
    p.add_argument("folder", type=Path, metavar="FOLDER")
    _add_common(p, writes=True)

    p = sub.add_parser("verify", help="check a claimed green-flash sighting",
                       description="Check whether a photo or clip of a green segment is "
                       "consistent with the physics of the setting sun; writes verdict.json "
                       "and verdict.html.")
    p.add_argument("folder", type=Path, metavar="FOLDER")
    _add_common(p, writes=True)

    p = sub.add_parser("calibrate", help="calibrate a camera's colour channels and geometry",
                       description="Measure plate scale, roll, lateral colour offsets and "
                       "effective wavelengths of the colour channels from a recording of the "
                       "Sun (ideally higher in the sky); writes calibration.json.")
    p.add_argument("folder", type=Path, metavar="FOLDER")
    p.add_argument("--sensitivities", type=Path, default=None, metavar="CSV",
                   help="channel sensitivities, CSV with columns wavelength_nm,r,g,b "
                   "(default: Gaussian bands R 600, G 530, B 460 +- 30 nm)")
    _add_common(p, writes=True)

    p = sub.add_parser("simulate", help="render a synthetic sunset folder from a scenario",
                       description="Render the frames a camera would record of a sunset "
                       "through a model atmosphere (format: docs/scenario.md).")
    p.add_argument("scenario", type=Path, metavar="SCENARIO.toml")
    p.add_argument("out_folder", type=Path, metavar="OUT_FOLDER")
    p.add_argument("--force", action="store_true",
                   help="replace an existing, non-empty output folder")
    p.add_argument("--quiet", action="store_true", help="no progress bars")
    return parser


def _observation_conditions(path: Path):
    from analyse.observation import read_observation
    from analyse.predict import Conditions

    obs = read_observation(path)
    t_C, p_hPa, rh = obs.air_at_lens()
    return obs, Conditions(obs.site.latitude_deg, obs.site.longitude_deg,
                           obs.site.eye_height_m, t_C, p_hPa, rh, obs.model.layer_top_m)


def _cmd_predict(args: argparse.Namespace) -> int:
    from analyse.observation import format_utc
    from analyse.predict import DETECTION_FRACTION, predict_sunset

    obs, cond = _observation_conditions(args.observation)
    frac = DETECTION_FRACTION if args.detection_fraction is None else args.detection_fraction
    if not 0.0 < frac < 0.5:
        raise InputError(f"--detection-fraction must be within 0..0.5, got {frac}")
    _check_lapse_rate(args.lapse_rate)
    pred = predict_sunset(cond, args.date, args.lapse_rate, detection_fraction=frac)
    if args.json:
        from analyse._offline import offline_notes

        doc = _prediction_json(pred, format_utc) | {"notes": [*pred.notes, *offline_notes()]}
        print(json.dumps(doc, indent=1))
        return 0
    print(_prediction_text(obs, cond, args.date, pred, format_utc))
    from analyse._offline import offline_notes

    for note in [*pred.notes, *offline_notes()]:
        print(f"  note: {note}")
    return 0


def _check_lapse_rate(value: float) -> None:
    if not -300.0 <= value <= 300.0:
        raise InputError(f"--lapse-rate must be within -300..300 K/km, got {value:g}")


def _round(value: float, digits: int) -> float | None:
    return None if value != value else round(float(value), digits)


def _prediction_json(pred, format_utc) -> dict:
    return {
        "schema": 1,
        "lapse_rate_K_per_km": pred.lapse_rate_K_per_km,
        "layer_top_m": pred.layer_top_m,
        "dip_arcmin": _round(pred.dip_arcmin.get("g", next(iter(pred.dip_arcmin.values()))), 3),
        "horizon_refraction_arcmin": {k: _round(v, 3)
                                      for k, v in pred.horizon_refraction_arcmin.items()},
        "last_light_utc": {k: format_utc(v) if v == v else None
                           for k, v in pred.last_light_unix_s.items()},
        "green_duration_s": _round(pred.green_duration_s, 3),
        "rg_offset_arcsec": _round(pred.rg_offset_arcsec, 2),
        "detection_fraction": pred.detection_fraction,
        "semidiameter_arcsec": _round(pred.semidiameter_arcsec, 2),
        "sunset_azimuth_deg": _round(pred.sunset_azimuth_deg, 3),
        "bands": {n: ch.band.description for n, ch in pred.model.channels.items()},
    }


def _prediction_text(obs, cond, date: str, pred, format_utc) -> str:
    site = obs.site
    ns = "N" if site.latitude_deg >= 0 else "S"
    ew = "E" if site.longitude_deg >= 0 else "W"
    where = f"{abs(site.latitude_deg):.3f} {ns}, {abs(site.longitude_deg):.3f} {ew}"
    name = f"{site.name} ({where})" if site.name else where
    last = pred.last_light_unix_s
    lines = [
        f"Sunset of {date} at {name}, eye {site.eye_height_m:g} m above the sea",
        f"  air at the lens     {cond.temperature_C:.1f} C, {cond.pressure_hPa:.1f} hPa, "
        f"relative humidity {100 * cond.relative_humidity:.0f} %",
        f"  atmosphere          {pred.model.atmosphere.description}",
        f"  dip of the horizon  {pred.dip_arcmin['g']:.2f} arcmin",
        "  horizon refraction  " + "  ".join(f"{k} {v:.2f}'" for k, v in
                                             pred.horizon_refraction_arcmin.items()),
        "  last light (UTC)    " + "  ".join(
            f"{k} {format_utc(v)[11:-1] if v == v else 'not defined'}" for k, v in last.items()),
        "  green segment       " + (
            f"{pred.green_duration_s:.2f} s; green limb {pred.rg_offset_arcsec:.1f} arcsec "
            "above red (median of the last minute)" if pred.green_duration_s == pred.green_duration_s
            else "not defined"),
        f"  detection level     {pred.detection_fraction:g} of the whole disc's flux",
        "  colour channels     " + "; ".join(f"{n}: {ch.band.description}"
                                             for n, ch in pred.model.channels.items()),
        "Safety: never look at the sun through a viewfinder, binoculars or a telescope "
        "without a proper solar filter; use live view, only in the last moments.",
    ]
    return "\n".join(lines)


def _cmd_refraction(args: argparse.Namespace) -> int:
    import numpy as np

    from analyse.atmosphere import linear_layer_atmosphere
    from analyse.refraction import make_medium, refraction_table, sea_horizon

    try:
        alts = [float(a) for a in args.altitudes.split(",") if a.strip()]
    except ValueError:
        raise InputError(f"--altitudes must be comma-separated degrees, got {args.altitudes!r}")
    if not alts or any(not -5.0 <= a <= 90.0 for a in alts):
        raise InputError(f"--altitudes must lie within -5..90 deg, got {args.altitudes!r}")
    if not 300.0 <= args.wavelength_nm <= 1690.0:
        raise InputError(f"--wavelength-nm must be within 300..1690 nm (Ciddor 1996), "
                         f"got {args.wavelength_nm:g}")
    _check_lapse_rate(args.lapse_rate)
    try:
        atm = linear_layer_atmosphere(
            args.lapse_rate, layer_top_m=args.layer_top_m, eye_height_m=args.eye_height_m,
            temperature_C=args.temperature_C, pressure_hPa=args.pressure_hPa,
            relative_humidity=args.humidity)
    except ValueError as exc:
        message = str(exc).replace("relative_humidity", "humidity").replace("_", "-")
        raise InputError(f"--{message}") from None
    medium = make_medium(atm, [args.wavelength_nm])
    refr = refraction_table(medium, np.array(alts))[0]
    dip = float(sea_horizon(medium).dip_arcmin[0]) if args.eye_height_m > 0 else 0.0
    refr = [None if not np.isfinite(r) or a < -dip / 60.0 else round(float(r), 4)
            for a, r in zip(alts, refr)]
    if args.json:
        print(json.dumps({"schema": 1, "apparent_altitude_deg": alts,
                          "refraction_arcmin": refr, "dip_arcmin": round(dip, 4)}))
        return 0
    print(f"Refraction at {args.wavelength_nm:g} nm; air at the eye {args.temperature_C:g} C, "
          f"{args.pressure_hPa:g} hPa, relative humidity {100 * args.humidity:.0f} %; "
          f"eye {args.eye_height_m:g} m; {atm.description}")
    print(f"dip of the sea horizon: {dip:.3f} arcmin")
    print(" apparent altitude [deg]   refraction [arcmin]")
    for a, r in zip(alts, refr):
        print(f" {a:22.3f}   {'below the horizon' if r is None else f'{r:.3f}'}")
    return 0


def _sunset_folder(folder: Path) -> Path:
    if not folder.exists():
        raise InputError("folder does not exist", folder)
    if not folder.is_dir():
        raise InputError("not a folder (give the sunset folder, not a file in it)", folder)
    return folder


def _folder_run(args: argparse.Namespace, suffix: str, needs: str):
    """The sunset folder, its observation and the checked output folder of a command."""
    folder = _sunset_folder(args.folder)  # before the slow imports
    from analyse.observation import read_observation
    from analyse.outfolder import check_output, default_output

    toml = folder / "observation.toml"
    if not toml.is_file():
        raise InputError(f"observation.toml is missing: {args.command} needs {needs} "
                         "(FOLDER-FORMAT.md)", folder)
    obs = read_observation(toml)
    out = args.out if args.out is not None else default_output(folder, suffix)
    return folder, obs, check_output(out, input_folder=folder, force=args.force)


def _cmd_report(args: argparse.Namespace) -> int:
    folder, obs, out = _folder_run(args, "report", "the site and the air")
    from analyse.infer import infer_lapse_rate, model_curves
    from analyse.outfolder import atomic_folder
    from analyse.pipeline import bands_for, measure_folder
    from analyse.report import write_report_html
    from analyse.results import result_document, write_frames_ecsv, write_result_json

    measurement = measure_folder(folder, obs, progress=not args.quiet)
    bands = bands_for(measurement.calibration, obs.camera.calibration)
    inference = infer_lapse_rate(measurement, obs, bands=bands, progress=not args.quiet)
    doc = result_document(measurement, inference, layer_top_m=obs.model.layer_top_m)
    curves = model_curves(inference, measurement, obs)
    with atomic_folder(out, force=args.force) as tmp:
        write_result_json(doc, tmp / "result.json")
        write_frames_ecsv(measurement, tmp / "frames.ecsv")
        write_report_html(tmp / "report.html", measurement, inference, obs, curves=curves)
    ob = doc["observables"]
    green = ob["green_duration_s"]
    print(f"{folder}: green segment "
          f"{'not measured' if green is None else f'{green:.2f} s'}; results in {out}")
    return 0


def _site_words(obs) -> str:
    site = obs.site
    where = (f"{abs(site.latitude_deg):.3f} {'N' if site.latitude_deg >= 0 else 'S'}, "
             f"{abs(site.longitude_deg):.3f} {'E' if site.longitude_deg >= 0 else 'W'}")
    return f"{site.name} ({where})" if site.name else where


def _cmd_verify(args: argparse.Namespace) -> int:
    folder, obs, out = _folder_run(args, "verify", "the site and the clock")
    from analyse.observation import format_utc
    from analyse.outfolder import atomic_folder
    from analyse.pipeline import measure_folder
    from analyse.verdict_page import write_verdict_html
    from analyse.verify import GAMMA_RANGE_K_PER_KM, verify_measurement

    meas = measure_folder(folder, obs, progress=not args.quiet)
    verdict = verify_measurement(meas, obs)
    t = meas.table.t_unix_s
    with atomic_folder(out, force=args.force) as tmp:
        (tmp / "verdict.json").write_text(json.dumps(verdict.as_json(), indent=1) + "\n",
                                          encoding="utf-8")
        write_verdict_html(tmp / "verdict.html", verdict, where=_site_words(obs),
                           folder=str(folder), frames=len(t),
                           when=f"{format_utc(float(t[0]))} to {format_utc(float(t[-1]))}",
                           gamma=GAMMA_RANGE_K_PER_KM)
    print(f"{folder}: {verdict.verdict}")
    for c in verdict.checks:
        mark = "ok " if c.passed else ("?  " if c.passed is None or not c.confident else "NO ")
        print(f"  {mark} {c.name}: {c.reason}")
    print(f"written to {out}")
    return 0


def _cmd_calibrate(args: argparse.Namespace) -> int:
    from calibration.run import run_calibrate

    folder = _sunset_folder(args.folder)
    result = run_calibrate(folder, out=args.out, force=args.force, quiet=args.quiet,
                           sensitivity_csv=args.sensitivities)
    scale = result.get("plate_scale_arcsec_per_px")
    print(f"{folder}: plate scale {scale:.4f} arcsec/px, roll {result.get('roll_deg', 0):+.3f} "
          f"deg; calibration written to {result.get('path', '?')}")
    return 0


def _cmd_simulate(args: argparse.Namespace) -> int:
    from analyse.writers import run_simulate

    truth = run_simulate(args.scenario, args.out_folder, force=args.force, quiet=args.quiet)
    frames = truth.get("rendering", {}).get("frame_count", "?")
    print(f"wrote {frames} frames to {args.out_folder}")
    return 0


COMMANDS: dict[str, Callable[[argparse.Namespace], int]] = {
    "predict": _cmd_predict,
    "refraction": _cmd_refraction,
    "simulate": _cmd_simulate,
    "report": _cmd_report,
    "verify": _cmd_verify,
    "calibrate": _cmd_calibrate,
}


def main(argv: Sequence[str] | None = None) -> int:
    """Run one command; return the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return COMMANDS[args.command](args)
    except InputError as exc:
        print(f"{PROG}: error: {exc.one_line()}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"{PROG}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # output piped into a program that stopped reading (head)
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except Exception as exc:  # a bug: say so plainly, the traceback only on request
        print(f"{PROG}: internal error ({type(exc).__name__}: {exc}); this is a bug. "
              "Set LIMBTRACE_DEBUG=1 to see the traceback.", file=sys.stderr)
        if os.environ.get("LIMBTRACE_DEBUG"):
            traceback.print_exc()
        return 1


if __name__ == "__main__":
    sys.exit(main())
