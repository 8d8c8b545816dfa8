"""Text and JSON of the ``trend`` command: the figures of :mod:`nutricap.model.trend`,
formatted, and ``trend.json`` written atomically."""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

import numpy as np

from nutricap.cautions import CAUTION
from nutricap.inputs.counts import ROW_CONVENTION, TOTAL_LABEL
from nutricap.model.trend import above_below, animals_text
from nutricap.report.manifest import package_versions, sha256_of_file
from nutricap.report.output_folder import write_error

TREND_CAUTIONS = (
    "Counts are usually indices: animals missed (detection below 1) and counting error make "
    "every figure here approximate, and a change in survey method breaks the series.",
    "A logistic fit on a short or unmanipulated series is weak evidence of K: count error "
    "alone can make growth appear to slow with density.",
    "Removals (harvest, culls, translocations) must be entered if known; without them the "
    "fit mistakes removals for density dependence and K and r_max are biased.",
    CAUTION,
)

JSON_NAME = "trend.json"


def build_payload(result: dict, counts_path: Path, level: float) -> dict:
    """The JSON object: the main series' figures at the top, each unit under ``units``."""
    main = TOTAL_LABEL if TOTAL_LABEL in result and len(result) > 1 else next(iter(result))
    payload = {"series": main, **result[main]}
    if len(result) > 1:
        payload["units"] = {
            label: figures for label, figures in result.items() if label != TOTAL_LABEL
        }
    payload.update(
        {
            "level": level,
            "counts_file": str(counts_path),
            "counts_sha256": sha256_of_file(counts_path),
            "versions": package_versions(),
            "cautions": list(TREND_CAUTIONS),
        }
    )
    return _json_ready(payload)


def json_text(payload: dict) -> str:
    """The JSON text of :func:`build_payload`'s object (indented, no NaN)."""
    return json.dumps(payload, indent=2, ensure_ascii=False, allow_nan=False)


def _json_ready(value):
    if isinstance(value, dict):
        return {key: _json_ready(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [_json_ready(item) for item in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def write_atomically(target: Path, text: str) -> None:
    """Write ``text`` to a temporary file beside ``target``, then move it into place."""
    target.parent.mkdir(parents=True, exist_ok=True)
    temporary = target.with_name(f".{target.name}.{os.getpid()}-{os.urandom(4).hex()}.partial")
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL
    handle = os.open(temporary, flags, 0o666)  # the user's umask applies (mkstemp: 0600)
    try:
        with os.fdopen(handle, "w", encoding="utf-8") as stream:
            stream.write(text)
        os.replace(temporary, target)
    except OSError as exc:
        Path(temporary).unlink(missing_ok=True)
        raise write_error(exc, target) from None
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise


def format_text(payload: dict) -> str:
    """The readable report of :func:`build_payload`'s object."""
    lines = [f"Population trend from {payload['counts_file']} ({ROW_CONVENTION})", ""]
    lines += _series_lines(payload["series"], payload, payload["level"])
    for label, figures in payload.get("units", {}).items():
        lines += [""] + _series_lines(f"unit {label}", figures, payload["level"])
    lines += ["", "Cautions:"] + [f"- {caution}" for caution in payload["cautions"]]
    return "\n".join(lines)


def _series_lines(label: str, f: dict, level: float) -> list[str]:
    pct = f"{100 * level:g}%"
    lines = [
        f"Series: {label}, {f['years'][0]}–{f['latest_year']}, {len(f['years'])} counts; "
        f"latest count {animals_text(f['latest_count'])} ({f['latest_year']})",
        "  interval     λ per year   r per year",
    ]
    lines += [
        f"  {i['from_year']}–{i['to_year']}    {i['lambda_per_year']:8.3f}   "
        f"{i['r_per_year']:+9.3f}"
        for i in f["intervals"]
    ]
    lines.append(
        f"  mean r = {f['r_mean']:+.3f} per year ({pct} interval {f['r_ci'][0]:+.3f} to "
        f"{f['r_ci'][1]:+.3f}); λ = {f['lambda_mean']:.3f} ({f['lambda_ci'][0]:.3f} to "
        f"{f['lambda_ci'][1]:.3f})"
    )
    lines += _logistic_lines(f, pct)
    if "capacity" in f:
        lines += _capacity_lines(f["capacity"])
    return lines


def _logistic_lines(f: dict, pct: str) -> list[str]:
    if f["r_max"] is None:
        return [f"  logistic: {f['ceiling_reason']}"]
    r_ci = (
        f" ({f['r_max_ci'][0]:.3f} to {f['r_max_ci'][1]:.3f})" if f["r_max_ci"] is not None else ""
    )
    if f["K"] is None:
        return [
            f"  logistic: K = none; {f['ceiling_reason']}",
            f"  r_max = {f['r_max']:.3f} per year{r_ci} (growth at the densities seen); "
            "K/2 and the sustained yield are not given without a ceiling",
        ]
    return [
        f"  logistic: K = {animals_text(f['K'])} animals ({pct} interval "
        f"{animals_text(f['K_ci'][0])} to {animals_text(f['K_ci'][1])}); "
        f"r_max = {f['r_max']:.3f} per year{r_ci}",
        f"  {f['ceiling_reason']}",
        f"  maximum sustained yield: at K/2 = {animals_text(f['msy_level'])} animals, "
        f"yield r_max·K/4 = {animals_text(f['msy_yield'])} animals per year",
        f"  phase: {f['phase']} (latest count is {100 * f['latest_count'] / f['K']:.0f}% of K)",
    ]


def _capacity_lines(c: dict) -> list[str]:
    lines = [f"  forage capacity of unit(s) {', '.join(c['units'])}: {c['statement']}"]
    if c["K_minus_ecc"] is not None:
        lines.append(f"  K from the counts is {above_below(c['K_minus_ecc'])} ECC from forage")
    return lines
