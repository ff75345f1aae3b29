"""The results folder of a sweep: manifest, one record and one plan per variant and objective.

Layout of ``DIR``::

    sweep.json                  manifest: the sweep file's content and hash, axes, variants
    results/<variant>-<objective>.json   one record per variant and objective (status, figures, inputs hash)
    plans/<variant>-<objective>.npz      the plan (solved results only)
    summary.csv, summary.parquet         one row per record (Parquet when pyarrow is installed)
    figures/*.png

Every file is written atomically (a temporary file moved into place), the
plan before its record, so a record on disk always has its plan. A process
killed mid-write leaves only hidden temporary files, which the next run
removes. A record counts as done when its inputs hash matches the variant's
current inputs.
"""
from __future__ import annotations

import csv
import json
import math
from pathlib import Path

from .. import __version__
from ..errors import SweepError
from ..files import atomic_output
from ..planfile import save_plan

MANIFEST = "sweep.json"
FORMAT = "sweep-results/1"
FIGURES = ("margin_min_planned_N", "margin_mean_planned_N", "margin_min_exact_N", "margin_mean_exact_N", "margin_figure",
           "margin_min_exact_all_points_N", "weakest_point", "low_margin_knots", "requirement_met", "peak_torque_use", "peak_friction_use", "seed_iterations", "iterations", "seed_time_s",
           "solve_time_s", "build_time_s", "certify_time_s", "wall_time_s")
LEADING = ("variant",)
TRAILING = ("objective", "status", "reason") + FIGURES + ("warm_start_from", "worker", "plan")


def manifest_for(sweep) -> dict:
    return {"format": FORMAT, "software": {"name": "brace", "version": __version__}, "name": sweep.name,
            "sweep_file": str(sweep.path), "fingerprint": sweep.fingerprint, "sweep": sweep.raw,
            "axes": [{"name": a.name, "sets": a.sets, "label": a.label} for a in sweep.axes], "objectives": sweep.objectives,
            "variants": [{"id": v.id, "values": v.values} for v in sweep.variants]}


def open_results(out, sweep) -> dict:
    """Prepare ``out`` for ``sweep``: write the manifest, or check the existing one belongs to this sweep.

    Raises ``SweepError`` when ``out`` holds results of a different sweep
    file (naming the fields that differ); removes temporary files a killed
    run left behind. Returns the manifest.
    """
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise SweepError("command line", "--out", "a folder for the sweep's results", f"{out} is a file")
    manifest = manifest_for(sweep)
    path = out / MANIFEST
    if path.exists():
        old = read_manifest(out)
        if old.get("fingerprint") != manifest["fingerprint"]:
            changed = changed_fields(old.get("sweep", {}), manifest["sweep"])
            raise SweepError(out, "", "results of this sweep file to resume, or a new --out folder",
                             "results of a different sweep (changed: " + ", ".join(changed or ["its content"]) + ")")
    else:
        write_json(path, manifest)
    for folder in (out / "results", out / "plans"):
        folder.mkdir(parents=True, exist_ok=True)
        for stray in folder.glob(".*"):
            stray.unlink(missing_ok=True)
    return manifest


def read_manifest(out) -> dict:
    path = Path(out) / MANIFEST
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise SweepError(out, "", f"a sweep results folder (with {MANIFEST})", "no manifest") from None
    except (OSError, ValueError) as exc:
        raise SweepError(path, "", "the manifest JSON written by brace sweep", str(exc)[:120]) from None
    if not isinstance(data, dict) or data.get("format") != FORMAT:
        raise SweepError(path, "format", f"'{FORMAT}'", data.get("format") if isinstance(data, dict) else data)
    return data


def changed_fields(old: dict, new: dict, prefix: str = "") -> list[str]:
    """Dotted names of the fields that differ between two sweep mappings."""
    out = []
    for key in sorted(set(old) | set(new), key=str):
        a, b = old.get(key), new.get(key)
        name = f"{prefix}{key}"
        if isinstance(a, dict) and isinstance(b, dict):
            out += changed_fields(a, b, name + ".")
        elif a != b:
            out.append(name)
    return out


def record_path(out, variant: str, objective: str) -> Path:
    return Path(out) / "results" / f"{variant}-{objective}.json"


def plan_path(out, variant: str, objective: str) -> Path:
    return Path(out) / "plans" / f"{variant}-{objective}.npz"


def stored(out, variant: str, objective: str, digest: str) -> dict | None:
    """The record made from the same inputs (with its plan, when it solved), or None.

    ``error`` records (an exception or a lost worker, not an answer about
    the variant) count as not done, so the next run tries them again.
    """
    record = read_record(record_path(out, variant, objective))
    if record is None or record.get("inputs") != digest or record.get("status") == "error":
        return None
    if record.get("status") == "solved" and not plan_path(out, variant, objective).is_file():
        return None
    return record


def read_record(path: Path) -> dict | None:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) else None


def save_result(out, result, digest: str) -> dict:
    """Store one objective's result: the plan (if any), then its record. Returns the record."""
    record = dict(result.record, inputs=digest, plan="")
    if result.plan is not None:
        path = plan_path(out, record["variant"], result.objective)
        save_plan(result.plan, path)
        record["plan"] = str(path.relative_to(out))
    write_json(record_path(out, record["variant"], result.objective), record)
    return record


def write_json(path: Path, data) -> None:
    with atomic_output(path, suffix=".json") as tmp:
        tmp.write_text(json.dumps(clean(data), indent=1, allow_nan=False) + "\n", encoding="utf-8")


def clean(value):
    """JSON-safe copy: NaN and infinities become None, NumPy numbers plain ones."""
    if isinstance(value, dict):
        return {str(k): clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean(v) for v in value]
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def records(out, manifest: dict, digests: dict | None = None) -> list[dict]:
    """The stored records of the manifest's variants and objectives, in sweep order.

    With ``digests`` (``{(variant, objective): inputs hash}``) only records
    made from those inputs count (stale ones are solved again, not summarized).
    """
    rows = []
    for variant in manifest["variants"]:
        for objective in manifest["objectives"]:
            record = read_record(record_path(out, variant["id"], objective))
            if record is None:
                continue
            if digests is None or record.get("inputs") == digests.get((variant["id"], objective)):
                rows.append(record)
    return rows


def write_summary(out, manifest: dict, rows: list[dict]) -> list[Path]:
    """``summary.csv`` (and ``summary.parquet`` with pyarrow) of ``rows``; returns the paths written."""
    out = Path(out)
    columns = list(LEADING) + [a["name"] for a in manifest["axes"]] + list(TRAILING)
    table = [{c: _cell(row.get(c)) for c in columns} for row in rows]
    written = [out / "summary.csv"]
    with atomic_output(written[0], suffix=".csv") as tmp, open(tmp, "w", newline="", encoding="utf-8") as stream:
        writer = csv.DictWriter(stream, fieldnames=columns)
        writer.writeheader()
        writer.writerows(table)
    try:
        import pyarrow as pa
        import pyarrow.parquet as pq
    except ImportError:
        return written
    written.append(out / "summary.parquet")
    data = {c: [_parquet_cell(row.get(c)) for row in rows] for c in columns}
    with atomic_output(written[1], suffix=".parquet") as tmp:
        pq.write_table(pa.table(data), tmp)
    return written


def _cell(value):
    if value is None:
        return ""
    if isinstance(value, list):
        return " ".join(f"{v:g}" for v in value)
    if isinstance(value, float):
        return f"{value:.6g}"
    return value


def _parquet_cell(value):
    if isinstance(value, list):
        return " ".join(f"{v:g}" for v in value)
    return value


def read_summary(path) -> list[dict]:
    """Rows of a ``summary.csv`` as text mappings (for tests and reports)."""
    with open(path, newline="", encoding="utf-8") as stream:
        return list(csv.DictReader(stream))
