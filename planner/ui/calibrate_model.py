"""The calibrate notebook's state without widgets: an assay, its fit, and the calibration file it makes.

The fit is :func:`planner.calibration.fit_assay` (maximum likelihood with censored samples); this layer
only holds it, summarises it in lab units and saves it beside a copy of the assay (the calibration file
records the assay's SHA-256, and a plan refuses a calibration whose assay changed).
"""

from __future__ import annotations

import hashlib
import math
from pathlib import Path
from typing import Any

import numpy as np
import traitlets

from planner.errors import InputError

MAX_ASSAY_BYTES = 5_000_000


def demo_assays() -> dict[str, Path]:
    """Invented demo assays shipped with the protocols (``protocols/assays/*.csv``)."""
    from planner.ui.planner_model import demo_directory

    folder = demo_directory()
    if folder is None or not (folder / "assays").is_dir():
        return {}
    return {p.stem: p for p in sorted((folder / "assays").glob("*.csv"))}


class CalibrateModel(traitlets.HasTraits):
    """Load an assay, fit it, look at the fit, save the calibration."""

    revision = traitlets.Int(0)
    message = traitlets.Unicode("")

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self.assay = None
        self.text: str | None = None
        self.calibration = None

    def load_text(self, name: str, content: bytes) -> None:
        from planner.calibration import parse_assay

        if len(content) > MAX_ASSAY_BYTES:
            raise InputError(name, f"{len(content)} bytes", f"an assay file of at most {MAX_ASSAY_BYTES} bytes")
        try:
            text = bytes(content).decode("utf-8")
        except UnicodeDecodeError:
            raise InputError(name, "not UTF-8 text", "a CSV file in UTF-8") from None
        self.assay = parse_assay(text, Path(name).name)
        self.text = text
        self.calibration = None
        self.revision += 1

    def load_demo(self, name: str) -> None:
        demos = demo_assays()
        if name not in demos:
            from planner.errors import choice_error

            raise choice_error("assay", name, list(demos))
        self.load_text(demos[name].name, demos[name].read_bytes())

    def fit(self) -> Any:
        from planner.calibration import fit_assay

        if self.assay is None:
            raise InputError("assay", "none", "an assay file loaded first")
        self.calibration = fit_assay(self.assay)
        self.revision += 1
        return self.calibration

    def summary(self) -> list[tuple[str, str]]:
        """(label, value) rows in lab units, with the 90 % interval of the rate where there is one."""
        cal = self.calibration
        if cal is None:
            return []
        from planner.ui.summary import fmt

        rows = [("Result", "fitted rate" if cal.kind == "fit" else "upper bound only (no sample froze)"),
                ("Samples (frozen)", f"{cal.samples} ({cal.frozen})"),
                ("Assay liquidus (°C)", fmt(cal.liquidus - 273.15)),
                ("Supercooling covered by the assay (K)",
                 f"{fmt(cal.measured_supercooling[0])} to {fmt(cal.measured_supercooling[1])}"),
                ("Reference supercooling (K)", fmt(cal.reference_supercooling))]
        rate = math.exp(cal.ln_rate_ref) * 1e-6  # 1/(m3 s) -> 1/(mL s)
        if cal.kind == "fit":
            lo, hi = cal.log_rate_interval(cal.reference_supercooling)
            rows.append(("Rate at the reference (1/(mL s))",
                         f"{fmt(rate)} (90 % interval {fmt(math.exp(lo) * 1e-6)} to {fmt(math.exp(hi) * 1e-6)})"))
        else:
            rows.append(("Rate at the reference, 95 % upper bound (1/(mL s))", fmt(rate)))
        rows.append(("Slope (1/K)" + (" – from the preset prior" if cal.slope_fixed else ""), fmt(cal.slope)))
        return rows

    def curve(self) -> dict[str, list[float]]:
        """Rate per mL against supercooling with its 90 % band, over the range the assay covers."""
        from planner.calibration import EXTRAPOLATION_MARGIN

        cal = self.calibration
        lo, hi = cal.measured_supercooling
        x = np.linspace(max(0.05, lo - EXTRAPOLATION_MARGIN), hi + EXTRAPOLATION_MARGIN, 60)
        centre = np.log(np.asarray(cal.rate(x), dtype=float) * 1e-6)
        per_m3 = centre + math.log(1e6)  # ln of the rate per m3, the unit of log_rate_interval
        # an upper bound has no interval: the band collapses onto the bound
        band = [cal.log_rate_interval(float(v)) for v in x] if cal.kind == "fit" else [(c, c) for c in per_m3]
        return {"supercooling": x.tolist(), "log10_rate": (centre / math.log(10)).tolist(),
                "log10_low": [(b[0] - math.log(1e6)) / math.log(10) for b in band],
                "log10_high": [(b[1] - math.log(1e6)) / math.log(10) for b in band],
                "measured": [lo, hi]}

    def save(self, folder: str | Path, name: str) -> Path:
        """Save the calibration as ``folder/name.yaml`` and the assay beside it (never overwriting)."""
        from planner.calibration import save_calibration

        if self.calibration is None or self.text is None:
            raise InputError("calibration", "none", "an assay fitted first")
        stem = "".join(c if c.isalnum() or c in "-_" else "-" for c in name.strip())
        if not stem:
            raise InputError("calibration name", name, "a file name (letters, digits, - and _)")
        folder = Path(folder).expanduser()
        if not folder.is_dir():
            raise InputError("folder", str(folder), "an existing folder")
        data_path = folder / self.assay.name
        data = self.text.encode("utf-8")
        if data_path.exists():
            if hashlib.sha256(data_path.read_bytes()).hexdigest() != hashlib.sha256(data).hexdigest():
                raise InputError("folder", str(data_path), "a folder without a different file of the assay's name")
        else:
            with data_path.open("xb") as fh:
                fh.write(data)
        return save_calibration(self.calibration, folder / f"{stem}.yaml")
