"""Firmware writers for a digital controller: C99 source, JSON and CSV (data in, text out).

Writing the returned texts to disk is the caller's job, e.g. with
:func:`loopwright._io.write_files_atomically`.
"""

from __future__ import annotations

from typing import Literal

from loopwright.discrete import DigitalDesign
from loopwright.export.c_code import c_identifier, render_c, sha256_text
from loopwright.export.csv_export import coefficients_csv, frequency_response_csv, render_csv
from loopwright.export.json_export import digital_dict, render_json

__all__ = [
    "c_identifier",
    "coefficients_csv",
    "digital_dict",
    "frequency_response_csv",
    "render",
    "render_c",
    "render_csv",
    "render_json",
    "sha256_text",
]


def render(
    design: DigitalDesign,
    fmt: Literal["c", "json", "csv"],
    *,
    design_name: str,
    design_text: str,
) -> dict[str, str]:
    """Files of one export format, ``{file name: text}``, named after the design.

    Parameters
    ----------
    design : loopwright.discrete.DigitalDesign
        Result of :func:`loopwright.discrete.design_digital`.
    fmt : {"c", "json", "csv"}
        ``"c"``: ``NAME.h`` and ``NAME.c``; ``"json"``: ``NAME_digital.json``; ``"csv"``:
        ``NAME_coefficients.csv`` and ``NAME_loop_z.csv`` (``NAME`` = :func:`c_identifier`
        of ``design_name``).
    design_name : str
        Design name.
    design_text : str
        Design file text (its SHA-256 is recorded in the C and JSON output).

    Returns
    -------
    dict of str to str

    Raises
    ------
    ValueError
        Unknown format.

    References
    ----------
    .. [1] ISO/IEC 9899:1999 (C99); ECMA-404 (JSON); RFC 4180 (CSV).
    """
    base = c_identifier(design_name)
    if fmt == "c":
        return render_c(design, design_name=design_name, design_text=design_text)
    if fmt == "json":
        text = render_json(design, design_name=design_name, design_sha256=sha256_text(design_text))
        return {f"{base}_digital.json": text}
    if fmt == "csv":
        return render_csv(design, basename=base)
    raise ValueError(f"format must be one of c, json, csv; got {fmt!r}")
