"""`bandwatch simulate`: write a synthetic spectrum (and optionally its truth JSON)."""
from __future__ import annotations

import argparse
import sys

HELP = "write a synthetic instrument-like spectrum of gases in a cell, with its truth record"

FORMATS = ("jcamp-dif", "jcamp-affn", "csv")
Y_CHOICES = ("transmittance", "absorbance", "percent")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("-o", "--output", metavar="FILE", help="spectrum file to write")
    parser.add_argument("--species", default="HCl",
                        help="comma-separated molecules (natural isotope shares) or isotopologue "
                        "labels, e.g. HCl or HCl,DCl or H35Cl (default HCl)")
    parser.add_argument("--pressure-atm", default="0.01",
                        help="partial pressure in atm: one value for every species, or one per "
                        "species, comma-separated (default 0.01)")
    parser.add_argument("--total-pressure-atm", type=float, default=None,
                        help="total cell pressure for line broadening (default: sum of partials)")
    parser.add_argument("--path-cm", type=float, default=10.0, help="cell path length, cm (default 10)")
    parser.add_argument("--temperature-K", dest="temperature_K", type=float, default=296.0,
                        help="gas temperature, K (default 296)")
    parser.add_argument("--bands", default="1-0", help="bands v'-v'', comma-separated (default 1-0)")
    parser.add_argument("--resolution", type=float, default=0.5,
                        help="resolution 1/(max optical path difference), cm-1 (default 0.5)")
    parser.add_argument("--apodization", default="happ-genzel",
                        help="boxcar, triangular, happ-genzel (default), blackman-harris-3, "
                        "norton-beer-weak, norton-beer-medium, norton-beer-strong")
    parser.add_argument("--zero-fill", type=int, default=2, help="zero-filling factor (default 2)")
    parser.add_argument("--range", dest="range_cm1", default=None, metavar="FIRST:LAST",
                        help="wavenumber range in cm-1 (default: the bands' lines +- 30 cm-1)")
    parser.add_argument("--snr", default="1000",
                        help="signal-to-noise of the 100%% line (noise sigma = 1/snr in T per point); "
                        "'none' for no noise (default 1000)")
    parser.add_argument("--noise-domain", choices=("interferogram", "points"), default="interferogram",
                        help="interferogram (default): noise made on the interferogram, correlated "
                        "as the apodization and zero filling make it; points: independent per point")
    parser.add_argument("--baseline-offset", type=float, default=0.0,
                        help="absorbance offset added everywhere (e.g. 0.5)")
    parser.add_argument("--baseline-tilt", type=float, default=0.0,
                        help="absorbance change from the range centre to its ends")
    parser.add_argument("--fringes", default=None, metavar="AMPLITUDE[:PERIOD]",
                        help="window fringes: relative amplitude, optional period in cm-1 (default 0.82)")
    parser.add_argument("--shift-cm1", type=float, default=0.0, help="wavenumber calibration shift, cm-1")
    parser.add_argument("--scale", type=float, default=1.0, help="wavenumber calibration scale factor")
    parser.add_argument("--scale-ppm", type=float, default=0.0,
                        help="wavenumber scale error in parts per million (added to --scale - 1)")
    parser.add_argument("--interferents", default="",
                        help="absorbers in the beam, KIND[:PRESSURE_ATM[:TEMPERATURE_K]] comma-separated, "
                        "KIND co2 or water (e.g. co2,water: a poor purge)")
    parser.add_argument("--background-interferents", default="",
                        help="absorbers that were in the beam for the background only (their lines "
                        "show inverted), same form, e.g. water:0.006:303")
    parser.add_argument("--seed", type=int, default=0, help="noise seed (default 0)")
    parser.add_argument("--format", dest="file_format", choices=FORMATS, default="jcamp-dif",
                        help="output format (default jcamp-dif)")
    parser.add_argument("--y", dest="y_kind", choices=Y_CHOICES, default="absorbance",
                        help="y values to write (default absorbance)")
    parser.add_argument("--decimals", type=int, default=None,
                        help="round the written y values to this many decimal places, as "
                        "instrument exports do (default: full precision)")
    parser.add_argument("--title", default=None, help="title stored in the file")
    parser.add_argument("--truth", metavar="FILE", default=None, help="also write the truth record (JSON)")
    parser.add_argument("--sample-runs", metavar="DIR", default=None,
                        help="regenerate the bundled demo runs into DIR instead (other options ignored)")


def _fail(message: str) -> int:
    print(f"bandwatch simulate: {message}", file=sys.stderr)
    return 2


def _parse_floats(text: str, what: str) -> list[float]:
    try:
        return [float(part) for part in text.split(",") if part.strip()]
    except ValueError:
        raise ValueError(f"{what} must be numbers separated by commas, got {text!r}") from None


def _parse_bands(text: str) -> tuple[tuple[int, int], ...]:
    bands = []
    for part in text.split(","):
        pieces = part.strip().split("-")
        if len(pieces) != 2 or not all(p.strip().isdigit() for p in pieces):
            raise ValueError(f"band {part.strip()!r} is not of the form V_UPPER-V_LOWER (e.g. 1-0)")
        bands.append((int(pieces[0]), int(pieces[1])))
    return tuple(bands)


def _parse_range(text: str) -> tuple[float, float]:
    pieces = text.split(":")
    if len(pieces) != 2:
        raise ValueError(f"--range must be FIRST:LAST in cm-1, got {text!r}")
    first, last = (float(p) for p in pieces)
    return (first, last) if first < last else (last, first)


def run(args: argparse.Namespace) -> int:
    from processing.errors import BandwatchError

    if args.sample_runs:
        from processing.sample_scenario import write_sample_runs

        try:
            written = write_sample_runs(args.sample_runs)
        except (OSError, ValueError, BandwatchError) as error:
            return _fail(str(error))
        print(f"wrote {len(written)} files to {args.sample_runs}")
        return 0
    if not args.output:
        return _fail("give an output file with -o FILE (or --sample-runs DIR)")
    try:
        settings = settings_from_args(args)
        from processing.simulate import simulate, write_spectrum

        result = simulate(settings)
        write_spectrum(args.output, result, args.file_format, args.y_kind, args.decimals)
        if args.truth:
            import json

            truth = result.truth.to_dict()
            truth["export"] = {"format": args.file_format, "y": args.y_kind, "decimals": args.decimals}
            with open(args.truth, "w", encoding="utf-8") as handle:
                handle.write(json.dumps(truth, indent=1) + "\n")
    except (ValueError, BandwatchError) as error:
        return _fail(str(error))
    except OSError as error:
        return _fail(f"{error.filename or args.output}: {error.strerror or error}")
    spectrum = result.spectrum
    print(f"wrote {args.output}: {spectrum.points} points, {spectrum.first_cm1:.3f}-{spectrum.last_cm1:.3f} cm-1, "
          f"{result.truth.lines.count} lines")
    return 0


def settings_from_args(args: argparse.Namespace):  # -> SimulationSettings (import kept lazy)
    """Turn the command-line options into simulator settings; ValueError on bad input."""
    from processing.instrument import Fringes, Instrument
    from processing.interferents import parse_interferent
    from processing.simulate import Cell, SampleGas, SimulationSettings, auto_range

    species = [s.strip() for s in args.species.split(",") if s.strip()]
    if not species:
        raise ValueError("--species is empty")
    pressures = _parse_floats(args.pressure_atm, "--pressure-atm")
    if len(pressures) == 1:
        pressures = pressures * len(species)
    if len(pressures) != len(species):
        raise ValueError(f"--pressure-atm gives {len(pressures)} values for {len(species)} species")
    bands = _parse_bands(args.bands)
    gases = tuple(SampleGas((name,), pressure, bands) for name, pressure in zip(species, pressures))
    snr_text = str(args.snr).strip().lower()
    snr = None if snr_text in ("none", "0", "inf") else float(snr_text)
    fringes = None
    if args.fringes:
        values = [float(v) for v in args.fringes.split(":")]
        fringes = Fringes(amplitude=values[0], period_cm1=values[1] if len(values) > 1 else 0.82)
    interferents = [parse_interferent(text) for text in args.interferents.split(",") if text.strip()]
    interferents += [parse_interferent(text, in_background=True)
                     for text in args.background_interferents.split(",") if text.strip()]
    cell = Cell(path_length_cm=args.path_cm, temperature_K=args.temperature_K,
                total_pressure_atm=args.total_pressure_atm)
    instrument = Instrument(
        resolution_cm1=args.resolution, apodization=args.apodization, zero_fill=args.zero_fill,
        snr=snr, noise_domain=args.noise_domain, baseline_offset=args.baseline_offset,
        baseline_tilt=args.baseline_tilt, fringes=fringes, calibration_shift_cm1=args.shift_cm1,
        calibration_scale=args.scale + args.scale_ppm * 1e-6,
        seed=args.seed,
    )
    title = args.title or f"simulated {','.join(species)} {args.path_cm:g} cm"
    settings = SimulationSettings(gases=gases, cell=cell, instrument=instrument,
                                  interferents=tuple(interferents), title=title)
    first, last = _parse_range(args.range_cm1) if args.range_cm1 else auto_range(settings)
    from dataclasses import replace

    return replace(settings, instrument=replace(instrument, first_cm1=first, last_cm1=last))
