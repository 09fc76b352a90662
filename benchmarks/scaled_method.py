"""A larger copy of the phosphate demo for the speed benchmark (invented data).

`write_scaled_method(folder, standards=40, samples=50)` writes method.toml and
readings.csv: the demo's equipment, stock and intermediate solutions, result and
validation settings, with `standards` standards made by burette from the
intermediate solution (0.25 mL steps into the 50 mL flask) and `samples` samples:
the demo's own samples (the reference materials, the control water and the spike,
which its validation and routine sections name) with their readings, and generated
river samples for the rest. Readings of the generated solutions are INVENTED: a
straight line through the demo's blank and slope plus a fixed pseudo-random scatter
(seeded), three per solution. Nothing here is a measurement.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "example_inputs" / "phosphate_assay"
INTERCEPT = 0.0118  # absorbance of the blank, about that of the demo's readings
SLOPE = 0.0823  # absorbance per umol/L in the 40 mm cell, about that of the demo's line
INTERMEDIATE = 50.0  # umol/L: the demo's 1 mmol/L stock diluted 5 mL to 100 mL


def _between(text: str, start: str, end: str | None) -> str:
    i = text.index(start)
    return text[i:] if end is None else text[i:text.index(end, i)]


def _standards_toml(volumes: list[float]) -> str:
    blocks = [f'[solutions.S{k + 1}]\nmade_by = "dilution"\nfrom = "intermediate"\n'
              f'aliquot = {{ item = "burette_25", volume = "{v:.2f} mL" }}\nflask = "flask_50"\n'
              for k, v in enumerate(volumes)]
    return "\n".join(blocks)


def _samples_toml(count: int, demo_samples: str) -> str:
    blocks = [f'[samples.river_{k + 1}]\ndescription = "generated river sample {k + 1} (invented)"\n'
              for k in range(count)]
    return "\n".join(blocks) + "\n" + demo_samples


def _calibration_toml(n_standards: int) -> str:
    names = ", ".join(f'"S{k + 1}"' for k in range(n_standards))
    return ('[calibration]\nstandards = [' + names + ']\nblanks = ["blank"]\nreadings = "readings.csv"\n'
            'cuvette = "cell_40"\nphotometer = "photometer"\nconcentration_unit = "µmol/L"\n')


def _demo_sample_ids(samples_toml: str) -> list[str]:
    return [line[len("[samples."):-1] for line in samples_toml.splitlines() if line.startswith("[samples.")]


def _readings(volumes: list[float], generated: int, rng: np.random.Generator, demo_csv: str,
              demo_samples: list[str]) -> str:
    rows = ["# INVENTED DATA generated for the speed benchmark: a line plus seeded scatter",
            "id,absorbance,series"]

    def three(ident: str, conc: float) -> None:
        for a in INTERCEPT + SLOPE * conc + rng.normal(0.0, 0.0015, 3):
            rows.append(f"{ident},{a:.4f},day 1")

    three("blank", 0.0)
    for k, v in enumerate(volumes):
        three(f"S{k + 1}", INTERMEDIATE * v / 50.0)
    for k in range(generated):
        three(f"river_{k + 1}", float(rng.uniform(1.2, 9.0)))
    rows += [line for line in demo_csv.splitlines() if line.split(",")[0] in demo_samples]
    return "\n".join(rows) + "\n"


def write_scaled_method(folder: Path, standards: int = 40, samples: int = 50, seed: int = 7) -> Path:
    """Write the scaled method into `folder`; returns the path of its method.toml."""
    text = (DEMO / "method.toml").read_text(encoding="utf-8")
    demo_samples = _between(text, "[samples.", "# ---- the reported result ----")
    ids = _demo_sample_ids(demo_samples)
    if standards < 3 or samples < len(ids):
        raise ValueError(f"the scaled method needs at least 3 standards and {len(ids)} samples (the demo's own)")
    volumes = [0.25 * (k + 1) * 40.0 / standards for k in range(standards)]  # 0.25 to 10 mL at 40
    header = ("# INVENTED DATA: a generated copy of the phosphate demo with "
              f"{standards} standards and {samples} samples, for the speed benchmark only.\n")
    body = (header + _between(text, "[settings]", "[solutions.S1]") + _standards_toml(volumes) + "\n"
            + "# ---- calibration and samples ----\n" + _calibration_toml(standards) + "\n"
            + _samples_toml(samples - len(ids), demo_samples) + "\n"
            + _between(text, "# ---- the reported result ----", None))
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "method.toml").write_text(body, encoding="utf-8")
    csv = _readings(volumes, samples - len(ids), np.random.default_rng(seed),
                    (DEMO / "readings.csv").read_text("utf-8"), ids)
    (folder / "readings.csv").write_text(csv, encoding="utf-8")
    return folder / "method.toml"
