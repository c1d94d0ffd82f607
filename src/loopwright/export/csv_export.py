"""CSV tables of a digital controller: coefficients and the sampled loop's response, text only."""

from __future__ import annotations

import csv
import io
from typing import Any

import numpy as np

from loopwright.discrete import DigitalDesign

__all__ = ["coefficients_csv", "frequency_response_csv", "render_csv"]


def _table(header: list[str], rows: list[list[Any]]) -> str:
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(header)
    for row in rows:
        writer.writerow(
            ["" if v is None else (repr(float(v)) if isinstance(v, float) else v) for v in row]
        )
    return buf.getvalue()


def coefficients_csv(design: DigitalDesign) -> str:
    """Coefficient table: ``k, b, a, b_q, a_q, b_int, a_int`` (one row per power of ``z^-1``).

    Parameters
    ----------
    design : loopwright.discrete.DigitalDesign

    Returns
    -------
    str
        CSV text (RFC 4180, ``\\n`` line ends). ``b_q``/``a_q`` are the quantised coefficients
        as real numbers; ``b_int``/``a_int`` are empty for float32 designs.

    References
    ----------
    .. [1] RFC 4180, *Common Format and MIME Type for Comma-Separated Values (CSV) Files*, 2005.
    """
    ctl = design.controller
    q = design.quantisation.controller
    fx = design.fixed_point
    rows = []
    for k in range(ctl.order + 1):
        rows.append(
            [
                k,
                float(ctl.b[k]),
                float(ctl.a[k]),
                float(q.b[k]),
                float(q.a[k]),
                fx.b_int[k] if fx else None,
                fx.a_int[k] if fx else None,
            ]
        )
    return _table(["k", "b", "a", "b_q", "a_q", "b_int", "a_int"], rows)


def frequency_response_csv(
    design: DigitalDesign,
    f_hz: Any = None,
    *,
    points_per_decade: int = 50,
    quantised: bool = False,
) -> str:
    """Sampled loop gain ``T(e^{j 2 pi f t_s})``: columns ``f_hz, mag_db, phase_deg``.

    Parameters
    ----------
    design : loopwright.discrete.DigitalDesign
    f_hz : array_like, optional
        Frequencies; default log-spaced from ``1e-4 fs`` to ``0.4999 fs``. [Hz]
    points_per_decade : int
        Density of the default grid.
    quantised : bool
        Use the quantised coefficients.

    Returns
    -------
    str
        CSV text. The phase is unwrapped along the grid, starting in (-180, 180] deg.

    References
    ----------
    .. [1] RFC 4180, *Common Format and MIME Type for Comma-Separated Values (CSV) Files*, 2005.
    """
    fs = design.options.sample_rate_hz
    if f_hz is None:
        lo, hi = np.log10(1e-4 * fs), np.log10(0.4999 * fs)
        f = np.logspace(lo, hi, int(np.ceil((hi - lo) * points_per_decade)) + 1)
    else:
        f = np.atleast_1d(np.asarray(f_hz, dtype=float))
    t = design.loop_response(f, quantised=quantised)
    with np.errstate(divide="ignore"):
        mag = 20.0 * np.log10(np.abs(t))
    phase = np.degrees(np.unwrap(np.angle(t)))
    if phase.size:
        first = phase[0]
        phase = phase - 360.0 * np.ceil((first - 180.0) / 360.0)
    rows = [[float(a), float(b), float(c)] for a, b, c in zip(f, mag, phase, strict=True)]
    return _table(["f_hz", "mag_db", "phase_deg"], rows)


def render_csv(design: DigitalDesign, *, basename: str) -> dict[str, str]:
    """Both CSV tables as ``{"<basename>_coefficients.csv": ..., "<basename>_loop_z.csv": ...}``.

    Parameters
    ----------
    design : loopwright.discrete.DigitalDesign
    basename : str
        File name stem.

    Returns
    -------
    dict of str to str

    References
    ----------
    .. [1] RFC 4180, *Common Format and MIME Type for Comma-Separated Values (CSV) Files*, 2005.
    """
    return {
        f"{basename}_coefficients.csv": coefficients_csv(design),
        f"{basename}_loop_z.csv": frequency_response_csv(design),
    }
