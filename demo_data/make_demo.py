"""Generate Scalewright's invented demo data: a draft "belonging in a community workshop" item pool.

Everything written by this script is invented: no real people, places or answers.  The scenario is a
community repair-and-woodworking workshop drafting 24 statements for three constructs:

* ``welcome``      - feeling welcomed by the people there (items W1-W8),
* ``contribution`` - feeling that one's skills matter to the place (items C1-C8),
* ``ownership``    - feeling the place is partly one's own (items O1-O8).

Answers are 1-5 agreement (1 = strongly disagree, 5 = strongly agree), made by cutting a continuous
three-factor model at fixed thresholds.  Problems are planted on purpose (see README.md, "Answer key").

Run ``python demo_data/make_demo.py`` to rewrite the CSV files beside this script, or
``python demo_data/make_demo.py --out DIR`` to write them elsewhere.  The output is byte-for-byte
identical on every run (seeded numpy ``default_rng``; integers only; ``\\n`` line endings).
"""
from __future__ import annotations

import argparse
import csv
import datetime as dt
from pathlib import Path

import numpy as np

SEED = 20261202
N_RESPONDENTS = 400
N_RETEST_KEPT = 144          # wave-1 respondents who came back for wave 2
N_RETEST_NEW = 6             # wave-2 IDs that were never in wave 1
RETEST_WEEKS = 6
RETEST_STABILITY = 0.85      # correlation of each person's factor scores between the waves
MISSING_CODE = -9
N_MISSING_CELLS = 40         # skipped answers in wave 1 (coded -9)
N_MISSING_RETEST = 12
CONSTRUCTS = ("welcome", "contribution", "ownership")
FACTOR_CORR = np.array([[1.00, 0.45, 0.50],
                        [0.45, 1.00, 0.40],
                        [0.50, 0.40, 1.00]])
# Cut points on the standardised latent response: 1 | 2 | 3 | 4 | 5.
THRESHOLDS = np.array([-1.6, -0.7, 0.2, 1.1])

# name, text, construct written for, reverse, loadings (welcome, contribution, ownership), shift
# ``shift`` moves the item's latent mean (positive = easier to agree with).
ITEMS = [
    ("W1", "When I walk in, somebody says hello.", "welcome", False, (0.50, 0.00, 0.00), 1.40),
    ("W2", "People at the workshop make me feel welcome.", "welcome", False, (0.70, 0.00, 0.00), 0.30),
    ("W3", "The people at the workshop make me feel welcomed.", "welcome", False, (0.70, 0.00, 0.00), 0.30),
    ("W4", "Staff & volunteers know my name.", "welcome", False, (0.65, 0.00, 0.00), 0.10),
    ("W5", "I can ask a question at the bench without feeling silly.", "welcome", False,
     (0.70, 0.00, 0.00), 0.20),
    ("W6", "Newcomers are shown around on their first visit.", "welcome", False, (0.60, 0.00, 0.00), 0.00),
    ("W7", "I feel at ease chatting with members I don't know yet.", "welcome", False,
     (0.65, 0.00, 0.00), 0.00),
    ("W8", "The workshop feels like home to me.", "welcome", False, (0.05, 0.00, 0.70), 0.10),
    ("C1", "Other members ask for my help with their projects.", "contribution", False,
     (0.00, 0.70, 0.00), -0.10),
    ("C2", "What I know about tools and materials is useful here.", "contribution", False,
     (0.00, 0.70, 0.00), 0.20),
    ("C3", "Compared with most members, my skills count for little here.", "contribution", True,
     (0.00, -0.65, 0.00), -0.20),
    ("C4", "When something breaks, people trust me to fix it.", "contribution", False,
     (0.00, 0.70, 0.00), -0.20),
    ("C5", "My suggestions have changed how the workshop does things.", "contribution", False,
     (0.00, 0.60, 0.00), -0.40),
    ("C6", "I have taught someone a skill here.", "contribution", False, (0.00, 0.65, 0.00), 0.00),
    ("C7", "I bring my own tools to the workshop.", "contribution", False, (0.00, 0.20, 0.00), 0.00),
    ("C8", "Repair evenings would be poorer without people like me.", "contribution", False,
     (0.00, 0.65, 0.00), -0.10),
    ("O1", "I think of the workshop as partly mine.", "ownership", False, (0.00, 0.00, 0.70), 0.00),
    ("O2", 'I say "our workshop", not "the workshop".', "ownership", False, (0.00, 0.00, 0.65), 0.00),
    ("O3", "If the workshop closed, I would feel I had lost something of my own.", "ownership", False,
     (0.00, 0.00, 0.70), 0.10),
    ("O4", "Everyone here makes me welcome, and I look after the place as if it were mine.", "ownership",
     False, (0.45, 0.00, 0.45), 0.20),
    ("O5", "I tidy up after others without being asked.", "ownership", False, (0.00, 0.00, 0.60), -0.20),
    ("O6", "I care what happens to the workshop's benches and machines.", "ownership", False,
     (0.00, 0.00, 0.65), 0.30),
    ("O7", "I would stand up for the workshop if neighbours complained about it.", "ownership", False,
     (0.00, 0.00, 0.65), 0.00),
    ("O8", "I have a say in how the workshop's money & space are used.", "ownership", False,
     (0.00, 0.00, 0.60), -0.40),
]
# W2 and W3 share a large item-specific part (same statement, one word changed): the near-duplicate pair.
DUPLICATE_PAIR = ("W2", "W3")
DUPLICATE_SPECIFIC = 0.46    # share of variance the pair has in common beyond the factor

COMMENTS = [
    "", "", "", "", "", "", "", "", "", "",
    "Love the Thursday repair cafe.",
    "Would come more often if it opened on Sundays.",
    "The lathe needs a new belt, again.",
    "Friendly, but hard to get time on the laser cutter.",
    "Parking is a pain; otherwise great.",
    "I mostly come for the tea & the chat.",
    "Please label the drawers!",
    "Felt a bit lost the first month.",
    "More beginner sessions, please",
    'Someone called my bowl "proper craftsmanship" - made my week.',
]

COORDINATORS = ("amira", "bo", "carmen")
N_LOGS = 40


def _latent(rng: np.random.Generator, factors: np.ndarray, specific_dup: np.ndarray) -> np.ndarray:
    """Continuous item responses (n x 24): loadings @ factors + item-specific + error, unit variance."""
    n = factors.shape[0]
    lam = np.array([it[4] for it in ITEMS])                       # 24 x 3
    common = factors @ lam.T                                       # n x 24
    common_var = np.einsum("ij,jk,ik->i", lam, FACTOR_CORR, lam)   # variance explained per item
    y = np.empty((n, len(ITEMS)))
    names = [it[0] for it in ITEMS]
    for j, name in enumerate(names):
        unique = 1.0 - common_var[j]
        noise = rng.standard_normal(n)
        if name in DUPLICATE_PAIR:
            rest = max(unique - DUPLICATE_SPECIFIC, 0.0)
            y[:, j] = common[:, j] + np.sqrt(DUPLICATE_SPECIFIC) * specific_dup + np.sqrt(rest) * noise
        else:
            y[:, j] = common[:, j] + np.sqrt(unique) * noise
    return y


def _to_agreement(y: np.ndarray) -> np.ndarray:
    shifts = np.array([it[5] for it in ITEMS])
    return (np.searchsorted(THRESHOLDS, y + shifts, side="right") + 1).astype(int)


def _factors(rng: np.random.Generator, n: int) -> np.ndarray:
    chol = np.linalg.cholesky(FACTOR_CORR)
    return rng.standard_normal((n, 3)) @ chol.T


def _plant_missing(rng: np.random.Generator, answers: np.ndarray, n_cells: int) -> np.ndarray:
    out = answers.copy()
    flat = rng.choice(out.size, size=n_cells, replace=False)
    out.flat[flat] = MISSING_CODE
    return out


def _write_csv(path: Path, header: list[str], rows: list[list]) -> None:
    with path.open("w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(header)
        w.writerows(rows)


def _response_rows(ids, joined, visits, comments, answers) -> list[list]:
    return [[ids[i], joined[i], int(visits[i]), *[int(v) for v in answers[i]], comments[i]]
            for i in range(len(ids))]


def generate(out_dir: Path) -> list[Path]:
    """Write the four demo CSV files into ``out_dir`` and return their paths."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(SEED)
    names = [it[0] for it in ITEMS]
    header = ["respondent", "joined", "visits_per_month", *names, "comment"]

    # ---- wave 1 ---------------------------------------------------------------------------------
    n = N_RESPONDENTS
    ids = [f"R{i:04d}" for i in range(1, n + 1)]
    f1 = _factors(rng, n)
    dup1 = rng.standard_normal(n)
    answers1 = _plant_missing(rng, _to_agreement(_latent(rng, f1, dup1)), N_MISSING_CELLS)
    first_day = dt.date(2019, 3, 1)
    span = (dt.date(2026, 9, 1) - first_day).days
    joined = [(first_day + dt.timedelta(days=int(d))).isoformat() for d in rng.integers(0, span, n)]
    visits1 = np.clip(np.round(rng.gamma(2.0, 2.0, n) + 0.8 * f1[:, 2]), 0, 20).astype(int)
    comments1 = [COMMENTS[k] for k in rng.integers(0, len(COMMENTS), n)]
    paths = [out_dir / "workshop_responses.csv"]
    _write_csv(paths[-1], header, _response_rows(ids, joined, visits1, comments1, answers1))

    # ---- codebook -------------------------------------------------------------------------------
    paths.append(out_dir / "workshop_codebook.csv")
    _write_csv(paths[-1], ["item", "text", "construct", "reverse", "min", "max"],
               [[name, text, construct, int(rev), 1, 5] for name, text, construct, rev, _, _ in ITEMS])

    # ---- wave 2, six weeks later: a subset came back, plus a few newcomers -----------------------
    kept = np.sort(rng.choice(n, size=N_RETEST_KEPT, replace=False))
    f2_kept = RETEST_STABILITY * f1[kept] + np.sqrt(1 - RETEST_STABILITY ** 2) * _factors(rng, len(kept))
    f2 = np.vstack([f2_kept, _factors(rng, N_RETEST_NEW)])
    dup2 = np.concatenate([RETEST_STABILITY * dup1[kept]
                           + np.sqrt(1 - RETEST_STABILITY ** 2) * rng.standard_normal(len(kept)),
                           rng.standard_normal(N_RETEST_NEW)])
    answers2 = _plant_missing(rng, _to_agreement(_latent(rng, f2, dup2)), N_MISSING_RETEST)
    new_ids = [f"R{i:04d}" for i in range(n + 1, n + 1 + N_RETEST_NEW)]
    ids2 = [ids[i] for i in kept] + new_ids
    wave2_day = dt.date(2026, 10, 5) + dt.timedelta(weeks=RETEST_WEEKS)
    joined2 = [joined[i] for i in kept] + [
        (wave2_day - dt.timedelta(days=int(d))).isoformat() for d in rng.integers(3, 40, N_RETEST_NEW)]
    visits2 = np.clip(np.concatenate([visits1[kept] + rng.integers(-2, 3, len(kept)),
                                      rng.integers(1, 6, N_RETEST_NEW)]), 0, 20)
    comments2 = [COMMENTS[k] for k in rng.integers(0, len(COMMENTS), len(ids2))]
    paths.append(out_dir / "workshop_retest.csv")
    _write_csv(paths[-1], header, _response_rows(ids2, joined2, visits2, comments2, answers2))

    # ---- inter-rater table: 3 coordinators x 40 project logs, 1-4 quality rubric -----------------
    true_quality = rng.normal(0.0, 1.0, N_LOGS)
    leniency = np.array([0.0, 0.35, -0.15])   # bo marks a little higher, carmen a little lower
    rows = []
    for i in range(N_LOGS):
        marks = []
        for r in range(len(COORDINATORS)):
            z = true_quality[i] + leniency[r] + rng.normal(0.0, 0.45)
            marks.append(int(np.searchsorted([-0.9, 0.1, 1.0], z, side="right") + 1))
        rows.append([f"L{i + 1:02d}", *marks])
    # A few logs were not read by every coordinator: empty cells.
    for cell in rng.choice(N_LOGS * len(COORDINATORS), size=7, replace=False):
        rows[cell // len(COORDINATORS)][1 + cell % len(COORDINATORS)] = ""
    paths.append(out_dir / "workshop_ratings.csv")
    _write_csv(paths[-1], ["log", *COORDINATORS], rows)
    return paths


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--out", type=Path, default=Path(__file__).resolve().parent,
                   help="folder to write the CSV files into (default: beside this script)")
    args = p.parse_args(argv)
    for path in generate(args.out):
        print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
