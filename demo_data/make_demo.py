"""Write the invented demo data and the demo study file.

Everything here is made up: the supplier, the part, the people and every number. The values come
from a numpy Generator with a fixed seed, so running this script again gives the same files.

    python demo_data/make_demo.py            # (re)write the files next to this script
    python demo_data/make_demo.py --out DIR  # write them somewhere else
    python demo_data/make_demo.py --check    # regenerate into a temporary folder and compare:
                                             # exit 1 if a committed data file differs byte for
                                             # byte, or the committed study file's content
                                             # (specs, criteria, decisions, comments) differs
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # run from a source checkout without installing

from studykit.store import StudyFile  # noqa: E402
from studykit.study import Characteristic, Criteria, Decision  # noqa: E402

SEED = 20260325
SUPPLIER = "Quendle & Vask Castings (fictional)"
PART = "QV-4410 coolant pump housing (fictional)"
TITLE = "QV-4410 pre-launch capability study"
START = datetime(2026, 3, 2, 6, 0)

PILOT_CSV = "pump_housing_pilot.csv"
PULL_CSV = "pull_off_force.csv"
LOTS_CSV = "leak_test_lots.csv"
GAUGE_CSV = "gauge_flange_thickness.csv"
REFERENCE_CSV = "gauge_flange_reference.csv"
SPECS_CSV = "specs.csv"
PULL_SPECS_CSV = "specs_pull_off.csv"
POSITION_CSV = "mounting_hole_position.csv"
CAVITIES_CSV = "impeller_cavities.csv"
WEAR_CSV = "shaft_seat_wear.csv"
STUDY_FILE = "pump_housing_pilot.study"
DATA_FILES = (
    PILOT_CSV,
    PULL_CSV,
    LOTS_CSV,
    GAUGE_CSV,
    SPECS_CSV,
    PULL_SPECS_CSV,
    REFERENCE_CSV,
    POSITION_CSV,
    CAVITIES_CSV,
    WEAR_CSV,
)
#: the short gauge study has its own seed, so the other files stay as they were before it
REFERENCE_SEED = SEED + 17
REFERENCE_VALUE = 8.0004

N_SUBGROUPS = 28
SUBGROUP_SIZE = 5
SHIFTED = (17, 18)  # flange thickness: a chipped insert, found and replaced after subgroup 18

CHARACTERISTICS = [
    Characteristic(
        "bore_diameter",
        unit="mm",
        lsl=11.970,
        usl=12.030,
        target=12.000,
        safety_critical=True,
        chart="xbar_r",
        description="Bearing seat bore, drawing QV-4410 rev B item 7 (invented)",
    ),
    Characteristic(
        "face_runout",
        unit="mm",
        usl=0.050,
        chart="xbar_r",
        description="Sealing face runout to bore axis; bounded at zero",
    ),
    Characteristic(
        "flange_thickness",
        unit="mm",
        lsl=7.900,
        usl=8.100,
        target=8.000,
        chart="xbar_r",
        description="Mounting flange thickness, op 30",
    ),
    Characteristic(
        "pull_off_force",
        unit="N",
        lsl=180.0,
        safety_critical=True,
        chart="imr",
        source=PULL_CSV,
        description="Destructive pull-off test of the pressed-in bushing, one specimen "
        "per half hour",
    ),
    Characteristic(
        "leak_test_defectives",
        chart="p",
        size_column="lot_size",
        source=LOTS_CSV,
        description="End-of-line leak test: rejected housings per lot",
    ),
    Characteristic(
        "impeller_hub_bore",
        unit="mm",
        lsl=5.970,
        usl=6.030,
        target=6.000,
        source=CAVITIES_CSV,
        description="Impeller hub bore, moulded in a 4-cavity tool; cavity 3 runs "
        "off-centre (invented)",
    ),
    Characteristic(
        "shaft_seat_diameter",
        unit="mm",
        lsl=14.980,
        usl=15.020,
        source=WEAR_CSV,
        description="Shaft seat turned over one insert's planned life; the insert wears (invented)",
    ),
]
CRITERIA = {
    c.name: Criteria(index="ppk", threshold=1.67, basis="lower_bound")
    for c in CHARACTERISTICS
    if not c.is_attribute
}
# the safety-critical bore is also judged by a tolerance interval: at least 99 % of parts within
# specification with 95 % confidence (ISO 16269-6), as a medical-device customer might ask
CRITERIA["bore_diameter"] = Criteria(
    index="ppk",
    threshold=1.67,
    basis="lower_bound",
    interval_coverage=0.99,
    interval_confidence=0.95,
)
#: the position study kept beside the demo study (zone diameter 0.20 mm)
POSITION_NAME = "mounting_hole_position"
POSITION_TOLERANCE = 0.20

# the recorded decisions and the comment of the demo study (fixed times so the demo is stable)
DECISIONS = [
    Decision(
        "flange_thickness",
        "exclude",
        subgroup="17",
        reason="Chipped insert on op 30, found at 14:50 and replaced before subgroup 19; "
        "parts made 14:00-14:50 quarantined under NCR-0412 (not representative of "
        "the process)",
        who="R. Okonkwo",
        when="2026-03-03T09:12:00Z",
    ),
    Decision(
        "flange_thickness",
        "exclude",
        subgroup="18",
        reason="Same chipped insert as subgroup 17 (NCR-0412)",
        who="R. Okonkwo",
        when="2026-03-03T09:13:00Z",
    ),
    Decision(
        "face_runout",
        "set_model",
        payload={"model": "lognormal"},
        reason="Runout is bounded at zero and right-skewed; a lognormal model is used "
        "instead of the normal",
        who="R. Okonkwo",
        when="2026-03-03T09:20:00Z",
    ),
]
COMMENT = dict(
    text="Gauge R&R for flange thickness (10 parts x 3 appraisers x 3 trials, "
    "gauge_flange_thickness.csv) is attached to the study; read its verdict before sign-off.",
    who="L. Haverkamp",
    when="2026-03-03T10:05:00Z",
)


def _rows_to_csv(header: list[str], rows: list[list[str]]) -> bytes:
    lines = [",".join(header)] + [",".join(r) for r in rows]
    return ("\n".join(lines) + "\n").encode("utf-8")


def make_files(rng: np.random.Generator) -> dict[str, bytes]:
    """Every demo data file as bytes, keyed by file name."""
    files: dict[str, bytes] = {}

    # -- the pilot run: three characteristics, 28 subgroups of 5 consecutive parts ------------
    rows = []
    for k in range(1, N_SUBGROUPS + 1):
        t0 = START + timedelta(minutes=30 * (k - 1))
        bore_mean = 12.002 + rng.normal(0, 0.0005)
        flange_mean = 8.000 + rng.normal(0, 0.004) + (0.05 if k in SHIFTED else 0.0)
        bore = bore_mean + rng.normal(0, 0.0045, SUBGROUP_SIZE)
        runout = rng.lognormal(np.log(0.010), 0.35, SUBGROUP_SIZE)
        flange = flange_mean + rng.normal(0, 0.015, SUBGROUP_SIZE)
        for j in range(SUBGROUP_SIZE):
            note = ""
            if k == 1 and j == 0:
                note = "first parts after setup approval"
            if k == SHIFTED[-1] + 1 and j == 0:
                note = "op 30 insert replaced (chipped)"
            stamp = (t0 + timedelta(minutes=2 * j)).strftime("%Y-%m-%d %H:%M")
            rows.append(
                [str(k), stamp, note, f"{bore[j]:.3f}", f"{runout[j]:.4f}", f"{flange[j]:.3f}"]
            )
    files[PILOT_CSV] = _rows_to_csv(
        [
            "subgroup",
            "timestamp",
            "note",
            "bore_diameter [mm]",
            "face_runout [mm]",
            "flange_thickness [mm]",
        ],
        rows,
    )

    # -- destructive pull-off test: one specimen per half hour, measured individually ---------
    pull = rng.normal(246.0, 11.0, 48)
    rows = [
        [str(i + 1), (START + timedelta(minutes=30 * i + 5)).strftime("%Y-%m-%d %H:%M"), f"{v:.1f}"]
        for i, v in enumerate(pull)
    ]
    files[PULL_CSV] = _rows_to_csv(["sample", "timestamp", "pull_off_force [N]"], rows)

    # -- end-of-line leak test: defectives per lot, lot size varies --------------------------
    sizes = rng.integers(180, 261, 25)
    defectives = rng.binomial(sizes, 0.012)
    rows = [
        [f"L{k + 1:03d}", str(n), str(d)]
        for k, (n, d) in enumerate(zip(sizes, defectives, strict=True))
    ]
    files[LOTS_CSV] = _rows_to_csv(["lot", "lot_size", "leak_test_defectives"], rows)

    # -- crossed gauge study on flange thickness: 10 parts x 3 appraisers x 3 trials ---------
    true = 8.000 + rng.normal(0, 0.03, 10)
    appraisers = {"A": 0.0, "B": 0.002, "C": -0.0015}
    interaction = rng.normal(0, 0.0008, (3, 10))
    rows = []
    for trial in range(1, 4):
        for a, (name, bias) in enumerate(appraisers.items()):
            for p in range(10):
                v = true[p] + bias + interaction[a, p] + rng.normal(0, 0.0025)
                rows.append([str(p + 1), name, str(trial), f"{v:.3f}"])
    files[GAUGE_CSV] = _rows_to_csv(["part", "appraiser", "trial", "value"], rows)

    # -- specifications tables (for `studykit study new --specs`) ---------------------------
    def num(x: float | None) -> str:
        return "" if x is None else f"{x:.3f}"

    def spec_row(c: Characteristic, crit: Criteria) -> list[str]:
        return [
            c.name,
            c.unit or "",
            num(c.lsl),
            num(c.usl),
            num(c.target),
            "yes" if c.safety_critical else "no",
            crit.index,
            f"{crit.threshold:g}",
            crit.basis,
        ]

    header = [
        "characteristic",
        "unit",
        "lsl",
        "usl",
        "target",
        "safety_critical",
        "criterion",
        "threshold",
        "basis",
    ]
    files[SPECS_CSV] = _rows_to_csv(
        header, [spec_row(c, CRITERIA[c.name]) for c in CHARACTERISTICS if c.source is None]
    )
    pull_spec = Characteristic("pull_off_force", unit="N", lsl=180.0, safety_critical=True)
    files[PULL_SPECS_CSV] = _rows_to_csv(header, [spec_row(pull_spec, Criteria())])
    files[POSITION_CSV] = position_file()
    files[CAVITIES_CSV] = cavities_file()
    files[WEAR_CSV] = wear_file()
    return files


def make_reference_readings(rng: np.random.Generator) -> bytes:
    """Short gauge study: one reference part (8.0004 mm) read 50 times by one person."""
    readings = REFERENCE_VALUE + 0.0006 + rng.normal(0, 0.0025, 50)
    rows = [[str(i + 1), f"{v:.3f}"] for i, v in enumerate(readings)]
    return _rows_to_csv(["reading_no", "reading"], rows)


def position_file() -> bytes:
    """Mounting-hole position (invented): X/Y deviations from nominal of 60 parts.

    Its own generator (seed SEED + 1), so the other files stay as they were. Built in: the hole
    sits 0.02 mm off nominal in X, spreads more in Y than in X and X and Y are correlated, so
    the two-dimensional PPM and the one-dimensional shortcut differ visibly (zone 0.20 mm).
    """
    g = np.random.default_rng(SEED + 1)
    cov = [[0.016**2, 0.4 * 0.016 * 0.026], [0.4 * 0.016 * 0.026, 0.026**2]]
    pts = g.multivariate_normal([0.020, -0.004], cov, size=60)
    rows = [[str(i + 1), f"{x:.4f}", f"{y:.4f}"] for i, (x, y) in enumerate(pts)]
    return _rows_to_csv(["part", "hole_dx [mm]", "hole_dy [mm]"], rows)


def cavities_file() -> bytes:
    """Impeller hub bore from a 4-cavity injection mould (invented): 25 subgroups of 3
    consecutive shots, each shot one part per cavity (300 parts).

    Its own generator (seed SEED + 2), so the other files stay as they were. Built in: cavity 3
    sits 0.012 mm above the others (an off-centre core pin); every cavity has the same spread
    (0.004 mm) and a small shot-to-shot variation common to all four.
    """
    g = np.random.default_rng(SEED + 2)
    offsets = {"1": 0.0, "2": 0.001, "3": 0.012, "4": -0.001}
    rows = []
    for k in range(1, 26):
        t0 = START + timedelta(days=1, minutes=20 * (k - 1))
        for shot in range(3):
            common = 6.000 + g.normal(0, 0.0015)
            stamp = (t0 + timedelta(seconds=40 * shot)).strftime("%Y-%m-%d %H:%M:%S")
            for cav, off in offsets.items():
                v = common + off + g.normal(0, 0.004)
                rows.append([str(k), stamp, cav, f"{v:.4f}"])
    return _rows_to_csv(["subgroup", "timestamp", "cavity", "impeller_hub_bore [mm]"], rows)


def wear_file() -> bytes:
    """Shaft seat diameter turned with one insert over its planned life (invented): 30
    subgroups of 5 consecutive parts, one subgroup every 20 minutes.

    Its own generator (seed SEED + 3). Built in: tool wear moves the diameter up by 0.0005 mm
    per subgroup (0.0145 mm over the insert's life, a systematic location change), the spread
    stays 0.0025 mm, no random shift between subgroups: a C3 process of ISO 22514-2.
    """
    g = np.random.default_rng(SEED + 3)
    rows = []
    for k in range(1, 31):
        t0 = START + timedelta(days=2, minutes=20 * (k - 1))
        mean = 14.9935 + 0.0005 * (k - 1)
        for j, v in enumerate(mean + g.normal(0, 0.0025, 5)):
            rows.append(
                [str(k), (t0 + timedelta(minutes=j)).strftime("%Y-%m-%d %H:%M"), f"{v:.4f}"]
            )
    return _rows_to_csv(["subgroup", "timestamp", "shaft_seat_diameter [mm]"], rows)


def write_study(folder: Path, files: dict[str, bytes]) -> Path:
    """The demo study file: three data files, specs, criteria, decisions with reasons, one
    comment, the gauge R&R result beside the characteristic it qualifies, the short gauge
    study and the position study of the mounting hole."""
    from studykit.stats.gauge import gauge_rr

    path = folder / STUDY_FILE
    sf = StudyFile.create(
        path,
        data=files[PILOT_CSV],
        filename=PILOT_CSV,
        title=TITLE,
        part=PART,
        supplier=SUPPLIER,
        characteristics=CHARACTERISTICS,
        criteria=CRITERIA,
        who="demo script",
        overwrite=True,
        extra_files=[
            (PULL_CSV, files[PULL_CSV]),
            (LOTS_CSV, files[LOTS_CSV]),
            (CAVITIES_CSV, files[CAVITIES_CSV]),
            (WEAR_CSV, files[WEAR_CSV]),
        ],
        when="2026-03-03T08:30:00Z",
    )
    for d in DECISIONS:
        sf.append_decision(d)
    rows = [line.split(",") for line in files[GAUGE_CSV].decode().splitlines()[1:]]
    flange = next(c for c in CHARACTERISTICS if c.name == "flange_thickness")
    result = gauge_rr(
        [float(r[3]) for r in rows],
        [r[0] for r in rows],
        [r[1] for r in rows],
        trials=[r[2] for r in rows],
        lsl=flange.lsl,
        usl=flange.usl,
    )
    sf.attach_result(
        "gauge_rr",
        "flange_thickness",
        dict(result.to_dict(), source=GAUGE_CSV),
        who="L. Haverkamp",
        when="2026-03-03T10:00:00Z",
    )
    from studykit.stats.gauge_type1 import short_gauge_study

    readings = [
        float(line.split(",")[1]) for line in files[REFERENCE_CSV].decode().splitlines()[1:]
    ]
    short = short_gauge_study(readings, reference=REFERENCE_VALUE, lsl=flange.lsl, usl=flange.usl)
    sf.attach_result(
        "gauge_short",
        "flange_thickness",
        dict(
            short.to_dict(),
            source_file=REFERENCE_CSV,
            limits_from="study",
            columns={"value": "reading"},
        ),
        who="L. Haverkamp",
        when="2026-03-03T10:01:00Z",
    )
    from studykit.positions import POSITION_KIND, position_payload

    rows = [line.split(",") for line in files[POSITION_CSV].decode().splitlines()[1:]]
    sf.attach_result(
        POSITION_KIND,
        None,
        position_payload(
            POSITION_NAME,
            [float(r[1]) for r in rows],
            [float(r[2]) for r in rows],
            tolerance=POSITION_TOLERANCE,
            unit="mm",
            source_file=POSITION_CSV,
            columns={"x": "hole_dx", "y": "hole_dy"},
            description="Mounting hole true position to datums A|B|C, zone diameter 0.20 mm "
            "(invented)",
        ),
        who="R. Okonkwo",
        reason="position study of the mounting hole",
        when="2026-03-03T10:03:00Z",
    )
    sf.add_comment(**COMMENT)
    return path


def generate(folder: Path) -> None:
    files = make_files(np.random.default_rng(SEED))
    files[REFERENCE_CSV] = make_reference_readings(np.random.default_rng(REFERENCE_SEED))
    for name, content in files.items():
        (folder / name).write_bytes(content)
    write_study(folder, files)


def logical_content(path: Path) -> dict:
    """What --check compares in a study file: everything but timestamps."""
    study = StudyFile(path).load()
    d = study.to_dict()
    for key in ("decisions", "comments", "signoffs"):
        for item in d[key]:
            item.pop("when", None)
    from studykit.positions import stored_positions

    d["positions"] = stored_positions(path)
    return d


def check(folder: Path) -> list[str]:
    problems = []
    with tempfile.TemporaryDirectory() as tmp:
        fresh = Path(tmp)
        generate(fresh)
        for name in DATA_FILES:
            committed = folder / name
            if not committed.exists():
                problems.append(f"{name}: missing (run python demo_data/make_demo.py)")
            elif committed.read_bytes() != (fresh / name).read_bytes():
                problems.append(f"{name}: differs from a fresh run of make_demo.py")
        if not (folder / STUDY_FILE).exists():
            problems.append(f"{STUDY_FILE}: missing (run python demo_data/make_demo.py)")
        else:
            try:
                old, new = logical_content(folder / STUDY_FILE), logical_content(fresh / STUDY_FILE)
            except ValueError as exc:
                problems.append(f"{STUDY_FILE}: cannot be read: {exc}")
            else:
                for key in new:
                    if old.get(key) != new[key]:
                        problems.append(f"{STUDY_FILE}: '{key}' differs from a fresh run")
    return problems


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=HERE, help="folder to write into")
    parser.add_argument(
        "--check",
        action="store_true",
        help="compare the committed files with a fresh run; exit 1 on a difference",
    )
    args = parser.parse_args(argv)
    if args.check:
        problems = check(args.out)
        for p in problems:
            print(f"demo check: {p}", file=sys.stderr)
        if problems:
            return 1
        print("demo check: all demo files match a fresh run")
        return 0
    args.out.mkdir(parents=True, exist_ok=True)
    generate(args.out)
    print(f"wrote {len(DATA_FILES)} data files and {STUDY_FILE} to {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
