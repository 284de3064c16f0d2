"""``ringdown moduli``: Young's modulus, shear modulus and Poisson's ratio of a tapped bar or rod.

Parses the specimen (millimetres and grams, converted to SI here), makes one call to
:func:`ringdown.moduli` and renders the result: a table, ``--json`` (exactly
``ModuliResult.to_dict()``), ``--csv`` and ``--report``. Exit status 0 when done, 2 when an input
or option cannot be used (one line on stderr).
"""

from __future__ import annotations

import csv
import math
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Optional

import typer

from ..base.errors import ParameterError
from ..base.numfmt import fmt_pm, fmt_value, fmt_values
from ._common import EXIT_EPILOG, EXIT_OK, guarded, print_json
from ._options import (
    Channel,
    Column,
    Debug,
    Json,
    Notes,
    Report,
    SampleRate,
    Serial,
    Title,
    reader_options,
    report_header,
)

if TYPE_CHECKING:
    from ..materials.results import ModuliResult

__all__ = ["register", "format_table"]


def _pm(v, u, scale: float = 1.0) -> str:
    """``v(u)`` in the one number format (:func:`ringdown.base.numfmt.fmt_pm`), both divided by ``scale``;
    "-" when missing."""
    if v is None:
        return "-"
    return fmt_pm(v / scale, None if u is None else u / scale, missing="-")


def format_table(result: ModuliResult) -> str:
    """The readable summary ``ringdown moduli`` prints by default."""
    sp = result.specimen
    if result.shape == "bar":
        size = f"rectangular bar {sp['length_m'] * 1e3:g} x {sp['width_m'] * 1e3:g} x {sp['thickness_m'] * 1e3:g} mm"
    else:
        size = f"cylindrical rod {sp['length_m'] * 1e3:g} mm long, {sp['diameter_m'] * 1e3:g} mm diameter"
    lines = [f"{size}, {sp['mass_kg'] * 1e3:g} g", ""]
    share = {}
    for q in ("e_pa", "g_pa", "poisson", "density_kg_per_m3"):
        d = result.dominant(q)
        s = next((b.share for b in result.budget if b.quantity == q and b.input == d), None)
        share[q] = "-" if d is None or s is None else f"{d} ({100 * s:.0f} %)"
    rows = [
        ("Young's modulus E", _pm(result.e_pa, result.e_pa_u, 1e9), "GPa", share["e_pa"]),
        ("shear modulus G", _pm(result.g_pa, result.g_pa_u, 1e9), "GPa", share["g_pa"]),
        (f"Poisson's ratio ({result.poisson_source})", _pm(result.poisson, result.poisson_u), "", share["poisson"]),
        ("density", _pm(result.density_kg_per_m3, result.density_kg_per_m3_u), "kg/m^3", share["density_kg_per_m3"]),
    ]
    head = ("quantity", "value(u), k = 1", "unit", "dominant input (share of variance)")
    widths = [max(len(r[i]) for r in [head, *rows]) for i in range(4)]
    fmt = lambda r: "  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip()  # noqa: E731
    lines.append(fmt(head))
    lines.extend(fmt(r) for r in rows)
    lines.append("")
    lines.append("modes used:")
    for m in (result.flexural, result.torsional):
        if m is None:
            continue
        eta = "-" if m.loss_factor is None else _pm(m.loss_factor, m.loss_factor_u)
        src = "" if m.source is None else f", {Path(m.source).name} mode {m.mode_index}"
        lines.append(f"  {m.role:<9}  f = {_pm(m.f_hz, m.f_hz_u)} Hz, loss factor {eta}{src}")
        lines.append(f"  {'':<9}  rule: {m.rule}")
    factors = f"T1 = {fmt_value(result.t1, 6)}"
    if result.r_factor is not None:
        factors += f", R = {fmt_value(result.r_factor, 6)}"
    lines.append(f"  {factors}; {result.iterations} iteration(s) of the Poisson's-ratio loop")
    lines.append("predicted (from E and 0 <= Poisson's ratio <= 0.5):")
    for p in result.predictions:
        found = "" if p["found_hz"] is None else f", found {fmt_value(p['found_hz'], 6)}"
        window = " to ".join(fmt_values([p["low_hz"], p["high_hz"]], 6))
        lines.append(f"  {p['mode']:<20} {fmt_value(p['f_hz'], 6)} Hz (window {window}{found})")
    if result.warnings:
        lines.append("warnings:")
        lines.extend(f"  [{w.code}] {w.message}" for w in result.warnings)
    lines.append("formulas: ASTM E1876 (Pickett T1, Saint-Venant R); GUM first-order uncertainties")
    return "\n".join(lines)


def _write_csv(result, out: Path) -> None:
    unit = {"e_pa": "Pa", "g_pa": "Pa", "poisson": "1", "density_kg_per_m3": "kg/m^3"}
    vals = {
        "e_pa": (result.e_pa, result.e_pa_u),
        "g_pa": (result.g_pa, result.g_pa_u),
        "poisson": (result.poisson, result.poisson_u),
        "density_kg_per_m3": (result.density_kg_per_m3, result.density_kg_per_m3_u),
    }
    from ..io.outputs import atomic_write, csv_row

    with atomic_write(out, newline="", what="CSV file") as fh:
        w = csv.writer(fh)
        w.writerow(
            [
                "quantity",
                "value",
                "u",
                "unit",
                "dominant_input",
                "shape",
                "f_flexural_hz",
                "f_torsional_hz",
                "loss_factor_flexural",
                "loss_factor_torsional",
                "t1",
                "r_factor",
            ]
        )
        t = result.torsional
        for q, (v, u) in vals.items():
            w.writerow(
                csv_row(
                    [
                        q,
                        v,
                        u,
                        unit[q],
                        result.dominant(q),
                        result.shape,
                        result.flexural.f_hz,
                        None if t is None else t.f_hz,
                        result.flexural.loss_factor,
                        None if t is None else t.loss_factor,
                        result.t1,
                        result.r_factor,
                    ]
                )
            )


def _write_report(result, out: Path, settings: dict, header: dict) -> None:
    from ..render.report import write_report
    from ..render.report_moduli import moduli_section

    header = {**header, "title": header.get("title") or "Elastic moduli from a tap"}
    write_report(list(result.analyses), out, settings=settings, extra_sections=[moduli_section(result)], **header)


def _required(name: str, value: Optional[float], shape: str) -> float:
    v = _positive(name, value, True, shape)
    assert v is not None  # _positive raised for a missing required value
    return v


def _positive(name: str, value: Optional[float], required: bool, shape: str) -> Optional[float]:
    if value is None:
        if required:
            raise ParameterError(f"{name} is required for --shape {shape}")
        return None
    if not math.isfinite(value) or value <= 0:
        raise ParameterError(f"{name} must be a positive number; got {value:g}")
    return value


def _nonneg(name: str, value: Optional[float]) -> float:
    if value is None:
        return 0.0
    if not math.isfinite(value) or value < 0:
        raise ParameterError(f"{name} must be >= 0; got {value:g}")
    return value


Flex = Annotated[Optional[str], typer.Argument(metavar="FLEX", help="Recording of the flexural tap.")]
Torsion = Annotated[Optional[str], typer.Argument(metavar="TORSION", help="Recording of the torsional tap.")]
Shape = Annotated[str, typer.Option("--shape", help="Specimen: 'bar' (rectangular) or 'rod' (cylindrical).")]
LengthMm = Annotated[Optional[float], typer.Option("--length-mm", help="Length, mm.")]
WidthMm = Annotated[Optional[float], typer.Option("--width-mm", help="Width of a bar, mm.")]
ThicknessMm = Annotated[
    Optional[float], typer.Option("--thickness-mm", help="Thickness of a bar (direction of the bending), mm.")
]
DiameterMm = Annotated[Optional[float], typer.Option("--diameter-mm", help="Diameter of a rod, mm.")]
MassG = Annotated[Optional[float], typer.Option("--mass-g", help="Mass, g.")]
ULengthMm = Annotated[Optional[float], typer.Option("--u-length-mm", help="Standard uncertainty of the length, mm.")]
UWidthMm = Annotated[Optional[float], typer.Option("--u-width-mm", help="Standard uncertainty of the width, mm.")]
UThicknessMm = Annotated[
    Optional[float], typer.Option("--u-thickness-mm", help="Standard uncertainty of the thickness, mm.")
]
UDiameterMm = Annotated[
    Optional[float], typer.Option("--u-diameter-mm", help="Standard uncertainty of the diameter, mm.")
]
UMassG = Annotated[Optional[float], typer.Option("--u-mass-g", help="Standard uncertainty of the mass, g.")]
FlexuralHz = Annotated[
    Optional[float], typer.Option("--flexural-hz", help="Flexural frequency by hand, Hz (instead of FLEX).")
]
UFlexuralHz = Annotated[Optional[float], typer.Option("--u-flexural-hz", help="Its standard uncertainty, Hz.")]
TorsionalHz = Annotated[
    Optional[float], typer.Option("--torsional-hz", help="Torsional frequency by hand, Hz (instead of TORSION).")
]
UTorsionalHz = Annotated[Optional[float], typer.Option("--u-torsional-hz", help="Its standard uncertainty, Hz.")]
FlexuralMode = Annotated[
    Optional[int], typer.Option("--flexural-mode", help="Mode index of FLEX to use (default: the lowest).")
]
TorsionalMode = Annotated[
    Optional[int],
    typer.Option(
        "--torsional-mode", help="Mode index of TORSION to use (default: the one in the predicted torsional window)."
    ),
]
Poisson = Annotated[
    Optional[float],
    typer.Option(
        "--poisson", help="Poisson's ratio: used for T1 without a torsional mode; otherwise the loop's first guess."
    ),
]
UPoisson = Annotated[Optional[float], typer.Option("--u-poisson", help="Standard uncertainty of --poisson.")]
CsvOut = Annotated[Optional[Path], typer.Option("--csv", help="Also write one row per quantity to this CSV file.")]

HELP = (
    "Young's modulus, shear modulus and Poisson's ratio of a bar or rod from its flexural "
    "(and torsional) tap recordings or frequencies, after ASTM E1876. Dimensions in mm, "
    "mass in g; each may carry a standard uncertainty (--u-...)."
)


def register(app: typer.Typer) -> None:
    """Add the ``moduli`` command to ``app``."""
    app.command("moduli", help=HELP, epilog=EXIT_EPILOG)(moduli_cmd)


def moduli_cmd(
    flexural_file: Flex = None,
    torsional_file: Torsion = None,
    shape: Shape = "bar",
    length_mm: LengthMm = None,
    width_mm: WidthMm = None,
    thickness_mm: ThicknessMm = None,
    diameter_mm: DiameterMm = None,
    mass_g: MassG = None,
    u_length_mm: ULengthMm = None,
    u_width_mm: UWidthMm = None,
    u_thickness_mm: UThicknessMm = None,
    u_diameter_mm: UDiameterMm = None,
    u_mass_g: UMassG = None,
    flexural_hz: FlexuralHz = None,
    u_flexural_hz: UFlexuralHz = None,
    torsional_hz: TorsionalHz = None,
    u_torsional_hz: UTorsionalHz = None,
    flexural_mode: FlexuralMode = None,
    torsional_mode: TorsionalMode = None,
    poisson: Poisson = None,
    u_poisson: UPoisson = None,
    channel: Channel = None,
    column: Column = None,
    sample_rate: SampleRate = None,
    json_out: Json = False,
    csv_out: CsvOut = None,
    report_out: Report = None,
    title: Title = None,
    notes: Notes = None,
    serial: Serial = None,
    debug: Debug = False,
) -> None:
    from ..materials.moduli import moduli

    def run():
        spec = _specimen(
            shape, length_mm, width_mm, thickness_mm, diameter_mm, mass_g,
            u_length_mm, u_width_mm, u_thickness_mm, u_diameter_mm, u_mass_g,
        )  # fmt: skip
        if (flexural_file is None) == (flexural_hz is None):
            raise ParameterError("give the flexural recording FLEX or --flexural-hz, one of the two")
        if torsional_file is not None and torsional_hz is not None:
            raise ParameterError("give the torsional recording TORSION or --torsional-hz, not both")
        flex = flexural_file if flexural_file is not None else flexural_hz
        assert flex is not None  # one of the two, checked above
        return moduli(
            spec,
            flex,
            torsional_file if torsional_file is not None else torsional_hz,
            flexural_hz_u=u_flexural_hz,
            torsional_hz_u=u_torsional_hz,
            flexural_mode=flexural_mode,
            torsional_mode=torsional_mode,
            poisson=poisson,
            poisson_u=u_poisson,
            analysis_options=reader_options(channel, column, sample_rate),
        )

    result = guarded(run, debug=debug)
    if json_out:
        print_json(result.to_dict())
    else:
        typer.echo(format_table(result))
    if csv_out is not None:
        guarded(lambda: _write_csv(result, csv_out), debug=debug)
    if report_out is not None:
        settings = {
            "command": "moduli",
            "shape": shape,
            "poisson": poisson,
            "flexural_mode": flexural_mode,
            "torsional_mode": torsional_mode,
        }
        guarded(lambda: _write_report(result, report_out, settings, report_header(title, notes, serial)), debug=debug)
    raise typer.Exit(EXIT_OK)


def _specimen(
    shape,
    length_mm,
    width_mm,
    thickness_mm,
    diameter_mm,
    mass_g,
    u_length_mm,
    u_width_mm,
    u_thickness_mm,
    u_diameter_mm,
    u_mass_g,
):
    """The specimen in SI units from the options in mm and g (each checked: one line per problem)."""
    from ..materials.moduli import CylindricalRod, RectangularBar

    if shape not in ("bar", "rod"):
        raise ParameterError(f"--shape must be 'bar' or 'rod'; got {shape!r}")
    L = _required("--length-mm", length_mm, shape)
    m = _required("--mass-g", mass_g, shape)
    if shape == "bar":
        if diameter_mm is not None:
            raise ParameterError("--diameter-mm is for --shape rod; a bar takes --width-mm and --thickness-mm")
        b = _required("--width-mm", width_mm, shape)
        t = _required("--thickness-mm", thickness_mm, shape)
        u_l, u_b = _nonneg("--u-length-mm", u_length_mm), _nonneg("--u-width-mm", u_width_mm)
        u_t, u_m = _nonneg("--u-thickness-mm", u_thickness_mm), _nonneg("--u-mass-g", u_mass_g)
        return RectangularBar(L * 1e-3, b * 1e-3, t * 1e-3, m * 1e-3, u_l * 1e-3, u_b * 1e-3, u_t * 1e-3, u_m * 1e-3)
    if width_mm is not None or thickness_mm is not None:
        raise ParameterError("--width-mm and --thickness-mm are for --shape bar; a rod takes --diameter-mm")
    d = _required("--diameter-mm", diameter_mm, shape)
    u_l, u_d = _nonneg("--u-length-mm", u_length_mm), _nonneg("--u-diameter-mm", u_diameter_mm)
    u_m = _nonneg("--u-mass-g", u_mass_g)
    return CylindricalRod(L * 1e-3, d * 1e-3, m * 1e-3, u_l * 1e-3, u_d * 1e-3, u_m * 1e-3)
