"""Seeded benchmark universes written as pipeline-ready data folders.

Wraps the demo generator (``data_demo/generate_demo.py``: a fat-tailed
factor model with GARCH-t components) so the benchmark runs on the same kind
of market as the demo, only larger. A folder is regenerated only when its
recipe changes (a ``recipe.json`` beside the data records it).
"""

from __future__ import annotations

import hashlib
import importlib.util
import json
import shutil
import sys
import time
from dataclasses import asdict, dataclass, replace
from pathlib import Path
from types import ModuleType

import numpy as np

__all__ = ["Universe", "UNIVERSES", "LAST_DATE", "NEXT_DATE", "load_generator", "write_universe", "working_copy", "add_next_day"]

REPO = Path(__file__).resolve().parents[1]
LAST_DATE = "2024-12-30"  # last price date of every universe; the next-day case adds NEXT_DATE
NEXT_DATE = "2024-12-31"


@dataclass(frozen=True)
class Universe:
    """Size of one benchmark universe.

    Attributes
    ----------
    name : label used for the folder
    instruments : number of instruments (EUR and USD; the last one is FX.USD)
    days : price dates, ending on :data:`LAST_DATE`
    portfolios, holdings : books and instruments per book (drawn at random)
    price_files : the instruments are split into this many price files
    seed : seeds the market and the books
    """

    name: str
    instruments: int
    days: int
    portfolios: int
    holdings: int
    price_files: int
    seed: int = 20_261_202

    def sized(self, instruments: int) -> "Universe":
        """The same recipe with another number of instruments (scaling runs).

        Holdings and price files grow in proportion, so every size holds
        almost every instrument and keeps about 400 instruments per file.
        """
        share = self.holdings / self.instruments
        files = max(1, round(self.price_files * instruments / self.instruments))
        return replace(self, name=f"{self.name}_{instruments}", instruments=instruments,
                       holdings=max(2, round(share * instruments)), price_files=files)


# 10 years of business days; 50 books of 200 names cover ~99.5 % of 2,000 instruments.
UNIVERSES: dict[str, Universe] = {
    "midsize": Universe("midsize", instruments=2000, days=2520, portfolios=50, holdings=200, price_files=5),
    "small": Universe("small", instruments=200, days=1000, portfolios=10, holdings=40, price_files=2),
    "tiny": Universe("tiny", instruments=24, days=800, portfolios=3, holdings=8, price_files=2),
}


def load_generator() -> ModuleType:
    """Import data_demo/generate_demo.py (not part of the package)."""
    name = "tailtrace_generate_demo"
    if name in sys.modules:
        return sys.modules[name]
    spec = importlib.util.spec_from_file_location(name, REPO / "data_demo" / "generate_demo.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module  # dataclasses look the module up while the file executes
    spec.loader.exec_module(module)
    return module


def _start_date(gen: ModuleType, days: int) -> str:
    calendar = gen.business_calendar("1990-01-01", LAST_DATE)
    if len(calendar) < days:
        raise ValueError(f"{days} price dates do not fit before {LAST_DATE}")
    return str(calendar[-days])


def write_universe(universe: Universe, out_dir: Path) -> dict:
    """Write (or reuse) the data folder of ``universe`` under ``out_dir``.

    Returns
    -------
    dict
        The recipe plus ``path``, ``rows`` (price rows), ``bytes`` (price
        files), ``seconds`` spent generating and ``reused`` (True when the
        folder was already there).
    """
    gen = load_generator()
    folder = Path(out_dir) / universe.name
    recipe_file = folder / "recipe.json"
    source = hashlib.sha256(Path(gen.__file__).read_bytes()).hexdigest()[:16]
    recipe = {**asdict(universe), "last_date": LAST_DATE, "generator": source, "numpy": np.__version__}
    if recipe_file.exists() and json.loads(recipe_file.read_text()).get("recipe") == recipe:
        return {**json.loads(recipe_file.read_text()), "reused": True}
    if folder.exists():
        shutil.rmtree(folder)
    started = time.perf_counter()
    rng = np.random.default_rng(universe.seed)
    paths = gen.simulate_market(universe.instruments, universe.days, seed=rng,
                                start=_start_date(gen, universe.days))
    if str(paths.dates[-1]) != LAST_DATE:
        raise RuntimeError(f"calendar ends {paths.dates[-1]}, expected {LAST_DATE}")
    files = gen.write_market(folder, paths, n_price_files=universe.price_files, n_portfolios=universe.portfolios,
                             holdings=universe.holdings, seed=rng)
    prices = [f for f in files if f.parent.name == "prices"]
    info = {
        "recipe": recipe,
        "path": str(folder),
        "rows": int(paths.prices.size),
        "bytes": int(sum(f.stat().st_size for f in prices)),
        "seconds": round(time.perf_counter() - started, 2),
    }
    recipe_file.write_text(json.dumps(info, indent=1, sort_keys=True))
    return {**info, "reused": False}


def working_copy(data_dir: Path, target: Path) -> Path:
    """A fresh copy of a data folder to run on, hard-linked where possible.

    Files are never edited through a link (:func:`add_next_day` replaces the
    file), so the generated folder stays as it was.
    """
    data_dir, target = Path(data_dir), Path(target)
    if target.exists():
        shutil.rmtree(target)
    shutil.copytree(data_dir, target, copy_function=_link_or_copy, ignore=shutil.ignore_patterns("recipe.json"))
    return target


def add_next_day(data_dir: Path, *, seed: int = 7) -> Path:
    """Append :data:`NEXT_DATE` to the first price file of a data folder, in place.

    Only that file changes, so Snakemake sees exactly one changed input. Each
    of its instruments moves by a seeded normal return of 1 % st. dev.

    Returns
    -------
    Path of the edited price file.
    """
    first = sorted((Path(data_dir) / "prices").glob("*.csv"))[0]
    text = first.read_text()
    lines = text.rstrip("\n").split("\n")
    last_day = lines[-1].split(",", 1)[0]
    if last_day >= NEXT_DATE:
        raise ValueError(f"{first} already has prices on {last_day}")
    tail = [ln for ln in lines[1:] if ln.startswith(last_day + ",")]
    moves = np.exp(np.random.default_rng(seed).normal(0.0, 0.01, len(tail)))
    new = []
    for line, move in zip(tail, moves):
        _, inst, close = line.split(",")
        decimals = len(close.split(".")[1]) if "." in close else 0
        new.append(f"{NEXT_DATE},{inst},{float(close) * move:.{decimals}f}")
    first.unlink()  # break a hard link before writing
    first.write_text(text + "\n".join(new) + "\n")
    return first


def _link_or_copy(src: str, dst: str) -> None:
    try:
        Path(dst).hardlink_to(src)
    except OSError:
        shutil.copy2(src, dst)
