"""Small catalogues and profiles built by the tests (no files shipped)."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

PROFILE_TOML = """\
id = "name"
group = "cluster"

[quantities.teff]
column = "Teff"
unit = "K"
error = "e_Teff"

[quantities.luminosity]
column = "logL"
unit = "dex(Lsun)"
error = "e_logL"

[quantities.radius]
column = "Rad"
unit = "Rsun"
error = "e_Rad"

[quantities.age]
column = "Age"
unit = "Gyr"

[quantities.phase]
column = "state"

[phases]
"dwarf" = "MS"
"giant" = "RGB"
"""


def sun_like(n: int, seed: int = 0) -> pd.DataFrame:
    """n stars obeying Stefan-Boltzmann exactly, with honest error columns."""
    rng = np.random.default_rng(seed)
    teff = rng.uniform(3500, 9000, n)
    radius = 10 ** rng.uniform(-0.5, 1.0, n)
    log_l = 2 * np.log10(radius) + 4 * np.log10(teff / 5772.0)
    return pd.DataFrame({
        "name": [f"S{i:06d}" for i in range(n)],
        "cluster": np.where(np.arange(n) % 2 == 0, "C-001", "C-002"),
        "Teff": teff,
        "e_Teff": 0.02 * teff,
        "logL": log_l,
        "e_logL": np.full(n, 0.03),
        "Rad": radius,
        "e_Rad": 0.04 * radius,
        "Age": np.full(n, 1.0),
        "state": np.where(np.arange(n) % 3 == 0, "giant", "dwarf"),
    })


def write_catalogue(tmp_path: Path, frame: pd.DataFrame, name: str = "cat.parquet",
                    row_group_size: int | None = None) -> Path:
    """Write ``frame`` as Parquet and a matching profile.toml beside it."""
    path = tmp_path / name
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), path,
                   row_group_size=row_group_size)
    (tmp_path / "profile.toml").write_text(PROFILE_TOML)
    return path


def visual_report_files(*figures: str) -> list[str]:
    """report.html and the given figures, which a report holds when matplotlib (the plot
    extra) is installed; nothing otherwise."""
    return [*figures, "report.html"] if importlib.util.find_spec("matplotlib") else []


def forbid_running_text(monkeypatch) -> None:
    """Make ``eval``/``exec`` fail and ``compile`` parse only (``ast.PyCF_ONLY_AST``).

    Code under test that turned text into running code would raise AssertionError.
    """
    import ast
    import builtins

    real_compile = builtins.compile

    def only_ast(source, filename, mode, flags=0, *args, **kwargs):
        assert flags & ast.PyCF_ONLY_AST, "compile() used for more than parsing"
        return real_compile(source, filename, mode, flags, *args, **kwargs)

    def forbidden(*args, **kwargs):
        raise AssertionError("eval or exec called")

    monkeypatch.setattr(builtins, "compile", only_ast)
    monkeypatch.setattr(builtins, "eval", forbidden)
    monkeypatch.setattr(builtins, "exec", forbidden)
