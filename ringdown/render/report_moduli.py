"""The elastic-moduli section of a report (``ringdown moduli``, ASTM E1876), built from
:mod:`.report`'s escaped pieces."""

from __future__ import annotations

import os
from typing import TYPE_CHECKING

from ..base.numfmt import fmt_fixed, fmt_value, fmt_values
from .report import _DASH, Section, _e, _kv_table, _pm, html_table

if TYPE_CHECKING:
    from ..materials.moduli import ModuliResult

__all__ = ["MODULI_SECTION_TITLE", "moduli_section"]

#: Heading of the elastic-moduli section.
MODULI_SECTION_TITLE = "Elastic moduli (ASTM E1876)"

_MODULI_FORMULAS = """
<p>Formulas: ASTM E1876 (impulse excitation; the family of ASTM C1259), after Pickett (1945) and
Spinner &amp; Tefft (1961). Rectangular bar: E = 0.9465 (m f<sub>f</sub>² / b)(L³ / t³) T1 with
Pickett's shear and rotary-inertia correction T1(μ, t/L); G = (4 L m f<sub>t</sub>² / (b t)) R with
R(b/t, b/L) from Saint-Venant torsion (Spinner &amp; Valore 1958). Cylindrical rod:
E = 1.6067 (L³ / D⁴) m f<sub>f</sub>² T1′, G = 16 m f<sub>t</sub>² L / (π D²).
Poisson's ratio μ = E / (2G) − 1, iterated with T1(μ). Uncertainties: first-order propagation
(JCGM 100:2008, GUM 5.1.2) of the frequency, dimension and mass uncertainties, inputs uncorrelated;
where each coefficient was verified is listed in the docstring of <code>ringdown.moduli</code>.</p>
<p class="note">The relations hold for homogeneous, isotropic, elastic specimens of uniform section
supported at the nodes of the mode measured; a dynamic modulus is not a design allowable. Decisions
on parts that carry load follow the applicable codes and licensed engineering practice.</p>
"""


def moduli_section(result: ModuliResult) -> Section:
    """The report section of a :class:`ringdown.materials.moduli.ModuliResult`: inputs, moduli, modes, budget.

    Insert it with ``render_report(result.analyses, extra_sections=[moduli_section(result)])``.
    Every string from outside (file names, warnings) is escaped.
    """
    out = _moduli_specimen(result) + _moduli_values(result) + _moduli_modes(result) + _moduli_budget(result)
    if result.warnings:
        lis = "".join(f'<li>{_e(w.message)} <span class="code">({_e(w.code)})</span></li>' for w in result.warnings)
        out.append(f'<h3>Warnings</h3><ul class="warnings">{lis}</ul>')
    out.append(_MODULI_FORMULAS)
    return Section(MODULI_SECTION_TITLE, "".join(out), anchor="moduli")


def _moduli_specimen(result: ModuliResult) -> list[str]:
    """The specimen's shape, dimensions (mm) and mass (g), each with its standard uncertainty."""
    sp = result.specimen
    mm = lambda v, u: _pm(None if v is None else v * 1e3, None if u is None else u * 1e3)  # noqa: E731
    rows = [
        ("shape", "rectangular bar" if result.shape == "bar" else "cylindrical rod"),
        ("length, mm", mm(sp["length_m"], sp["length_m_u"])),
    ]
    if result.shape == "bar":
        rows += [
            ("width, mm", mm(sp["width_m"], sp["width_m_u"])),
            ("thickness, mm", mm(sp["thickness_m"], sp["thickness_m_u"])),
        ]
    else:
        rows.append(("diameter, mm", mm(sp["diameter_m"], sp["diameter_m_u"])))
    rows.append(("mass, g", _pm(sp["mass_kg"] * 1e3, sp["mass_kg_u"] * 1e3)))
    return ["<h3>Specimen</h3>", _kv_table(rows)]


def _moduli_values(result: ModuliResult) -> list[str]:
    """The moduli table (E, G, Poisson's ratio, density; dominant inputs) and the correction factors."""
    gpa = lambda v, u: _pm(None if v is None else v / 1e9, None if u is None else u / 1e9)  # noqa: E731
    res_rows = [
        ("Young's modulus E, GPa", gpa(result.e_pa, result.e_pa_u), result.dominant("e_pa") or _DASH),
        (
            "shear modulus G, GPa",
            gpa(result.g_pa, result.g_pa_u) if result.g_pa is not None else _DASH,
            result.dominant("g_pa") or _DASH,
        ),
        (
            f"Poisson's ratio ({result.poisson_source})",
            _pm(result.poisson, result.poisson_u),
            result.dominant("poisson") or _DASH,
        ),
        (
            "density, kg/m³",
            _pm(result.density_kg_per_m3, result.density_kg_per_m3_u),
            result.dominant("density_kg_per_m3") or _DASH,
        ),
    ]
    out = [
        "<h3>Moduli</h3>",
        '<p class="legend">Values v(u): u is the standard uncertainty (k = 1) in units of the last digit; the dominant input has the largest share of '
        "the variance.</p>",
        html_table(("quantity", "value", "dominant input"), res_rows, numeric=[False, True, False]),
    ]
    factors = f"T1 = {fmt_value(result.t1, 6)}"
    if result.r_factor is not None:
        factors += f", R = {fmt_value(result.r_factor, 6)}"
    factors += f"; {result.iterations} iteration{'s' if result.iterations != 1 else ''} of the Poisson's-ratio loop"
    out.append(f"<p>{_e(factors)}</p>")
    return out


def _moduli_modes(result: ModuliResult) -> list[str]:
    """The modes used (frequency, loss factor, source, window, rule) and the predicted modes."""
    mode_rows = []
    for m in (result.flexural, result.torsional):
        if m is None:
            continue
        where = _DASH if m.source is None else f"{os.path.basename(m.source)}, mode {m.mode_index}"
        window = (
            _DASH
            if m.predicted_low_hz is None
            else " to ".join(fmt_values([m.predicted_low_hz, m.predicted_high_hz], 6))
        )
        mode_rows.append((m.role, _pm(m.f_hz, m.f_hz_u), _pm(m.loss_factor, m.loss_factor_u), where, window, m.rule))
    out = [
        "<h3>Modes used</h3>",
        html_table(
            ("mode", "f, Hz", "loss factor η", "from", "predicted window, Hz", "how it was chosen"),
            mode_rows,
            numeric=[False, True, True, False, True, False],
        ),
    ]
    pred_rows = [
        (
            p["mode"].replace("_", " "),
            fmt_value(p["f_hz"], 6, missing=_DASH),
            " to ".join(fmt_values([p["low_hz"], p["high_hz"]], 6)),
            _DASH if p["found_hz"] is None else fmt_value(p["found_hz"], 6, missing=_DASH),
        )
        for p in result.predictions
    ]
    out += [
        "<h4>Predicted modes</h4>",
        html_table(("mode", "predicted, Hz", "window, Hz", "found, Hz"), pred_rows, numeric=[False, True, True, True]),
    ]
    return out


def _moduli_budget(result: ModuliResult) -> list[str]:
    """The uncertainty budget: one row per input with a nonzero uncertainty."""
    unit = {"e_pa": "Pa", "g_pa": "Pa", "poisson": "", "density_kg_per_m3": "kg/m³"}
    b_rows = [
        (
            b.quantity,
            b.input,
            fmt_value(b.input_value, 6, missing=_DASH),
            fmt_value(b.input_u, 3, missing=_DASH),
            fmt_value(b.sensitivity, 4, missing=_DASH),
            f"{fmt_value(b.contribution, 3, missing=_DASH)} {unit.get(b.quantity, '')}".rstrip(),
            f"{fmt_fixed(100 * b.share, 1)} %",
        )
        for b in result.budget
        if b.input_u > 0
    ]
    return [
        "<h3>Uncertainty budget</h3>",
        html_table(
            ("quantity", "input", "value (SI)", "u (SI)", "sensitivity", "contribution", "share"),
            b_rows,
            numeric=[False, False, True, True, True, True, True],
        ),
    ]
