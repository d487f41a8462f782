"""Invented demo and benchmark data: the Lakeshore Regional Statistics Office.

The fictional Statistics Office of the Lakeshore Region codes the job titles of its annual workplace
survey to SOC 2018 detailed occupations and links the surveyed employers to its business register.
Everything generated here is invented (employers, streets, towns, respondents); only the SOC 2018
codes and titles (O*NET database, CC BY 4.0) and the NAICS 2022 codes (U.S. Census Bureau) are real.

The generators are seeded and vectorized: titles are built per distinct (variant, transformation)
pair and then indexed, so a million survey records take seconds. The same seed and sizes always give
the same frames.

Surface noise in the title scenario (documented rates, applied independently):

- Spanish titles: about 3% of records (drawn only for occupations with Spanish forms);
  gendered forms ("salesman", "waitress"): 15% of records of occupations that have them;
- multi-role titles ("cook / dishwasher"): 3%; abbreviations (mgr, asst, whse, rn ...): 15% of
  records whose title has an abbreviable word; qualifiers (Sr., II, nights, PT, #12 ...): 12%;
  misspellings (one edit operation): 5%; case and punctuation: 30% Title Case, 15% UPPER, 5% sentence
  case, 5% stray punctuation or spacing; blank context: 2%;
- new-year-only titles: about 2% of the new year's records;
- vague titles shared by a whole major group ("operator", "associate", "nurse", "clerk"), told apart
  only by the workplace if at all: ``vague_share`` (default 18%) of English records;
- production label noise: ``noise`` share of past and manual codes disagree with the expert code,
  three quarters of them to a confusable or same-minor-group occupation, one quarter at random; vague,
  misspelled, Spanish, multi-role and new titles are twice as likely to be miscoded.

Example
-------
>>> from titlematch.datasets.scenario import make_title_scenario
>>> frames = make_title_scenario(records_per_year=1_000, new_records=200, gold_records=50)
>>> sorted(frames)
['gold', 'new', 'new_kinds', 'new_truth', 'past']
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from ._register import register_scenario
from ._sampling import identifiers
from ._titles import VAGUE_SHARE, miscode, title_model, title_records, year_weights
from ..coding.codes import onet_classification
from ..io import write_table


def classification() -> pd.DataFrame:
    """SOC 2018 detailed occupations (``code, title``) from the O*NET reference table (CC BY 4.0)."""
    return onet_classification("soc")


def _check_count(name: str, value: object, minimum: int = 0) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise ValueError(f"{name} must be an integer >= {minimum}, got {value!r}")
    return int(value)


def _check_share(name: str, value: object, low: float, high: float) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not low <= value <= high:
        raise ValueError(f"{name} must be a number between {low} and {high}, got {value!r}")
    return float(value)


def make_title_scenario(seed: int = 7, years: tuple[int, ...] = (2022, 2023, 2024), records_per_year: int = 20_000,
                        new_year: int = 2025, new_records: int = 6_000, gold_records: int = 2_000,
                        noise: float = 0.12, vague_share: float = VAGUE_SHARE) -> dict[str, pd.DataFrame]:
    """Invented survey job titles of the Lakeshore Regional Statistics Office.

    Parameters
    ----------
    seed : int
        Same seed and sizes give identical frames.
    years : tuple of int
        Past survey years, each with ``records_per_year`` production-coded records.
    new_year, new_records : int
        The year to code and its number of records (it has titles never seen before).
    gold_records : int
        Size of the expert-coded gold sample drawn from the new year.
    noise : float
        Share of production (past and manual) codes that disagree with the expert code; realistic
        values are 0.10-0.15, anything in 0-0.5 is accepted.
    vague_share : float
        Share of records answered with a vague title their major group shares ("operator",
        "associate", "nurse"), which only the workplace can narrow down. The default makes the demo
        refer about as many records as offices with real data do (a fifth to a half at 98%); 0 gives
        the easier scenario of earlier versions, record for record.

    Returns
    -------
    dict of DataFrame
        ``past`` (title, context, code, year), ``gold`` (record_id, title, context, code, manual_code),
        ``new`` (record_id, title, context), ``new_truth`` (record_id, code, manual_code) and
        ``new_kinds`` (record_id, kind: standard, gendered, spanish, new_title or vague, with +misspelled
        and +multi_role marks) for benchmark breakdowns.

    Example
    -------
    >>> frames = make_title_scenario(records_per_year=500, new_records=100, gold_records=20)
    >>> list(frames["past"].columns)
    ['title', 'context', 'code', 'year']
    """
    seed = _check_count("seed", seed)
    records_per_year = _check_count("records_per_year", records_per_year)
    new_records = _check_count("new_records", new_records)
    gold_records = _check_count("gold_records", gold_records)
    noise = _check_share("noise", noise, 0.0, 0.5)
    vague_share = _check_share("vague_share", vague_share, 0.0, 0.9)
    years = tuple(_check_count("years", year, 1) for year in years)
    new_year = _check_count("new_year", new_year, 1)
    if new_year in years:
        raise ValueError(f"new_year {new_year} must not be one of the past years {years}")
    if gold_records > new_records:
        raise ValueError(f"gold_records ({gold_records}) cannot exceed new_records ({new_records})")
    model = title_model()

    past = []
    for year in years:
        rng = np.random.default_rng([seed, year])
        records = title_records(model, rng, records_per_year, year_weights(model, seed, year), new_titles=False,
                                vague_share=vague_share)
        production = miscode(model, rng, records["occupation"], records["propensity"], noise)
        past.append(pd.DataFrame({"title": records["title"], "context": records["context"],
                                  "code": model.codes[production].astype(object),
                                  "year": np.full(records_per_year, year, dtype=np.int64)}))
    past_frame = (pd.concat(past, ignore_index=True) if past
                  else pd.DataFrame({"title": [], "context": [], "code": [], "year": []}))

    rng = np.random.default_rng([seed, new_year])
    records = title_records(model, rng, new_records, year_weights(model, seed, new_year), new_titles=True,
                            vague_share=vague_share)
    manual = miscode(model, rng, records["occupation"], records["propensity"], noise)
    record_id = identifiers(f"T{new_year}-", new_records)
    new = pd.DataFrame({"record_id": record_id, "title": records["title"], "context": records["context"]})
    truth = pd.DataFrame({"record_id": record_id, "code": model.codes[records["occupation"]].astype(object),
                          "manual_code": model.codes[manual].astype(object)})
    chosen = np.sort(rng.permutation(new_records)[:gold_records])
    gold = new.iloc[chosen].merge(truth.iloc[chosen], on="record_id").reset_index(drop=True)
    kinds = pd.DataFrame({"record_id": record_id, "kind": records["kind"]})
    return {"past": past_frame, "gold": gold, "new": new, "new_truth": truth, "new_kinds": kinds}



def make_register_scenario(seed: int = 11, register_rows: int = 20_000, new_records: int = 3_000,
                           new_employer_share: float = 0.15, chain_share: float = 0.2) -> dict[str, pd.DataFrame]:
    """Invented business register of the Lakeshore Region and the survey's establishment records.

    Parameters
    ----------
    seed : int
        Same seed and sizes give identical frames.
    register_rows : int
        Establishments on the register; ``chain_share`` of them are branches of chains, written with the
        same name at different addresses.
    new_records : int
        Establishments reported in the survey; ``new_employer_share`` of them are not on the register
        (about 30% of those are new branches of register chains: same name, new address, no match).

    Returns
    -------
    dict of DataFrame
        ``register`` (register_id, name, address, city, postcode, naics, size_class), ``new``
        (record_id, name, address, city, postcode, naics; naics sometimes blank), ``truth`` (record_id,
        register_id, "" when not on the register) and ``new_kinds`` (record_id, kind: on_register,
        on_register_branch, new_employer, new_branch).

    Example
    -------
    >>> frames = make_register_scenario(register_rows=500, new_records=100)
    >>> round(float(frames["truth"]["register_id"].eq("").mean()), 2)
    0.15
    """
    seed = _check_count("seed", seed)
    register_rows = _check_count("register_rows", register_rows, 1)
    new_records = _check_count("new_records", new_records)
    new_employer_share = _check_share("new_employer_share", new_employer_share, 0.0, 1.0)
    chain_share = _check_share("chain_share", chain_share, 0.0, 0.9)
    unmatched = int(round(new_employer_share * new_records))
    matched = new_records - unmatched
    if matched > register_rows:
        raise ValueError(f"new_records ({new_records}) needs {matched} register establishments but "
                         f"register_rows is {register_rows}")
    return register_scenario(np.random.default_rng([seed, 1]), register_rows, matched, unmatched, chain_share)


# ---------------------------------------------------------------------------------------------------
# Files.
# ---------------------------------------------------------------------------------------------------
FULL_SIZES = {"records_per_year": 20_000, "new_records": 6_000, "gold_records": 2_000,
              "register_rows": 20_000, "establishments": 3_000}
SMALL_SIZES = {"records_per_year": 6_000, "new_records": 1_500, "gold_records": 800,
               "register_rows": 5_000, "establishments": 800}


def write_scenario(out_dir: str | Path, seed: int = 7, small: bool = False) -> dict[str, Path]:
    """Write the whole invented scenario as CSV files into ``out_dir`` (created if missing).

    Files: ``past_2022.csv``, ``past_2023.csv``, ``past_2024.csv``, ``gold_2025.csv``, ``new_2025.csv``,
    ``new_2025_truth.csv``, ``classification.csv``, ``register.csv``, ``establishments_2025.csv`` and
    ``establishments_2025_truth.csv``. The register scenario uses ``seed + 4`` (11 for the default 7).
    ``small=True`` writes sizes for a demo of a few minutes and for tests.

    Returns
    -------
    dict
        File stem -> path, e.g. ``{"past_2022": Path(".../past_2022.csv"), ...}``.

    Example::

        paths = write_scenario("lakeshore_demo", small=True)
    """
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise ValueError(f"out_dir {str(out)!r} exists and is not a folder")
    out.mkdir(parents=True, exist_ok=True)
    sizes = SMALL_SIZES if small else FULL_SIZES
    titles = make_title_scenario(seed=seed, records_per_year=sizes["records_per_year"],
                                 new_records=sizes["new_records"], gold_records=sizes["gold_records"])
    register = make_register_scenario(seed=seed + 4, register_rows=sizes["register_rows"],
                                      new_records=sizes["establishments"])
    tables = {f"past_{year}": frame.reset_index(drop=True) for year, frame in titles["past"].groupby("year")}
    tables.update({"gold_2025": titles["gold"], "new_2025": titles["new"], "new_2025_truth": titles["new_truth"],
                   "classification": classification(), "register": register["register"],
                   "establishments_2025": register["new"], "establishments_2025_truth": register["truth"]})
    return {name: write_table(frame, out / f"{name}.csv") for name, frame in tables.items()}

