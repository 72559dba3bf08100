"""Input formats beside Parquet: CSV/TSV, FITS, VOTable, ECSV and hive-partitioned datasets.

Each file is written by the test itself (pyarrow or astropy) from the same small catalogue,
and must give exactly the flags the Parquet copy gives.
"""

from __future__ import annotations

import sys

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest
from factory import sun_like, write_catalogue

import catcheck
from catcheck import formats
from catcheck.cli import main
from catcheck.errors import EXIT_CATALOGUE, CatalogueError
from catcheck.formats import (
    CsvCatalogue,
    FitsCatalogue,
    JoinedCatalogue,
    column_metadata,
    format_of,
    open_catalogue,
)
from catcheck.inference import propose_profile
from catcheck.reader import ParquetCatalogue

#: about reading, not the physics: the core pack is enough
CORE = ["core"]


def faulty_catalogue(rows: int = 120) -> pd.DataFrame:
    """The factory's Stefan-Boltzmann-exact stars with three planted faults and gaps."""
    frame = sun_like(rows)
    frame.loc[[row for row in (3, 40, 77) if row < rows], "logL"] += 1.0
    frame.loc[5, "Teff"] = np.nan
    frame.loc[[7, 8], "state"] = None
    return frame


def write_astropy(frame: pd.DataFrame, path, **kwargs) -> None:
    table = pytest.importorskip("astropy.table").Table.from_pandas(frame)
    table["Teff"].unit = "K"
    table.write(path, overwrite=True, **kwargs)


WRITERS = {
    "csv": lambda frame, path: pacsv.write_csv(pa.Table.from_pandas(frame), path),
    "tsv": lambda frame, path: pacsv.write_csv(pa.Table.from_pandas(frame), path,
                                               pacsv.WriteOptions(delimiter="\t")),
    "fits": write_astropy,
    "ecsv": write_astropy,
    "vot": lambda frame, path: write_astropy(frame, path, format="votable"),
}


@pytest.mark.parametrize("suffix", list(WRITERS))
def test_every_format_gives_the_parquet_flags(tmp_path, suffix) -> None:
    frame = faulty_catalogue()
    parquet = write_catalogue(tmp_path, frame)
    other = tmp_path / f"cat.{suffix}"
    WRITERS[suffix](frame, other)
    expected = catcheck.check(parquet, tmp_path / "profile.toml", CORE, batch_rows=50)
    found = catcheck.check(other, tmp_path / "profile.toml", CORE, batch_rows=50)
    assert expected.flags["row"].tolist() == [3, 40, 77]
    pd.testing.assert_frame_equal(found.flags, expected.flags)
    assert found.summary["rows"] == 120
    assert found.summary["rules"] == expected.summary["rules"]
    assert found.summary["input"] == str(other)


def fits_table(tmp_path, name: str = "cat.fits", rows: int = 10):
    """A FITS table written column by column, with TUNIT, TUCD, TCOMM and TNULL cards."""
    fits = pytest.importorskip("astropy.io.fits")
    teff = np.linspace(4000.0, 6000.0, rows)
    columns = [
        fits.Column(name="ID", format="8A", array=np.array([f"  s{i} " for i in range(rows)])),
        fits.Column(name="Teff", format="D", unit="K", array=teff),
        fits.Column(name="logTe", format="E", unit="dex(K)", array=np.log10(teff)),
        fits.Column(name="Label", format="10A",
                    array=np.array(["Dwarf   ", "  ", "giant"] * (rows // 3) + ["Dwarf"] *
                                   (rows % 3))),
        fits.Column(name="flag", format="J", null=-99, array=np.where(np.arange(rows) % 4 == 0,
                                                                      -99, 1)),
    ]
    hdu = fits.BinTableHDU.from_columns(columns)
    hdu.header["TUCD2"] = "phys.temperature.effective"
    hdu.header["TCOMM2"] = "effective temperature from spectra"
    hdus = fits.HDUList([fits.PrimaryHDU(), fits.ImageHDU(np.zeros((2, 2))), hdu])
    path = tmp_path / name
    hdus.writeto(path)
    return path, teff


def test_fits_metadata_strings_nulls_and_byte_order(tmp_path) -> None:
    path, teff = fits_table(tmp_path)
    catalogue = open_catalogue([path])
    assert isinstance(catalogue, FitsCatalogue) and catalogue.hdu == 2
    assert catalogue.num_rows == 10
    assert column_metadata(catalogue.schema.field("Teff")) == {
        "unit": "K", "ucd": "phys.temperature.effective",
        "description": "effective temperature from spectra"}
    assert column_metadata(catalogue.schema.field("logTe")) == {"unit": "dex(K)"}
    assert catalogue.schema.field("logTe").type == pa.float32()
    batches = list(catalogue.batches(["ID", "Label", "flag", "Teff"], 4))
    assert [first for first, _ in batches] == [0, 4, 8]
    assert [b.num_rows for _, b in batches] == [4, 4, 2]
    table = pa.Table.from_batches([b for _, b in batches])
    assert table.schema.names == ["ID", "Label", "flag", "Teff"]
    assert table["ID"].to_pylist()[:3] == ["s0", "s1", "s2"]  # blank padding stripped
    assert table["Label"].to_pylist()[:3] == ["Dwarf", None, "giant"]  # blank is null
    assert table["flag"].to_pylist()[:5] == [None, 1, 1, 1, None]  # TNULLn
    values = table["Teff"].to_numpy()
    assert values.dtype.byteorder in ("=", "<" if sys.byteorder == "little" else ">")
    np.testing.assert_array_equal(values, teff)


def test_several_fits_files_are_one_catalogue(tmp_path) -> None:
    first, _ = fits_table(tmp_path, "a.fits", rows=6)
    second, _ = fits_table(tmp_path, "b.fits", rows=5)
    catalogue = open_catalogue([tmp_path / "*.fits"])
    assert isinstance(catalogue, JoinedCatalogue) and catalogue.num_rows == 11
    assert catalogue.description == f"{first} and 1 more files"
    catalogue.check_columns(["ID", "Teff"])
    rows = [(first_row, batch.num_rows) for first_row, batch in catalogue.batches(["ID"], 4)]
    assert rows == [(0, 4), (4, 2), (6, 4), (10, 1)]
    assert catalogue.full_schema().names == ["ID", "Teff", "logTe", "Label", "flag"]
    assert sum(b.num_rows for _, b in catalogue.full_batches(100)) == 11
    del second


def test_files_that_disagree_on_a_column_type(tmp_path) -> None:
    frame = faulty_catalogue(20)
    pacsv.write_csv(pa.Table.from_pandas(frame), tmp_path / "a.csv")
    frame["Teff"] = "hot"
    pacsv.write_csv(pa.Table.from_pandas(frame), tmp_path / "b.csv")
    catalogue = open_catalogue([tmp_path / "a.csv", tmp_path / "b.csv"])
    with pytest.raises(CatalogueError, match="'Teff' is string here but double"):
        catalogue.check_columns(["name", "Teff"])


def test_csv_types_come_from_the_whole_file(tmp_path, monkeypatch) -> None:
    monkeypatch.setattr(formats, "_CSV_SCAN_BLOCK", 1 << 16)  # ~3,000 rows a block
    rows = 30_000
    ints = np.arange(rows).astype(str)
    later_float = ints.copy()
    later_float[-1] = "2.5"
    late_numbers = np.full(rows, "", dtype=object)
    late_numbers[-3:] = ["1", "NaN", "7"]
    big = np.full(rows, "1", dtype=object)
    big[-1] = str(2**63 + 5)
    text = "id,age,late,big,label\n" + "".join(
        f"S{i},{a},{b},{c},{'x' if i % 2 else ''}\n"
        for i, (a, b, c) in enumerate(zip(later_float, late_numbers, big, strict=True)))
    path = tmp_path / "cat.csv"
    path.write_text(text)
    catalogue = CsvCatalogue.open(path)
    assert catalogue.num_rows == rows and not catalogue.native  # the first block misled
    assert dict(zip(catalogue.schema.names, map(str, catalogue.schema.types), strict=True)) \
        == {"id": "string", "age": "double", "late": "int64", "big": "uint64",
            "label": "string"}
    batches = list(catalogue.batches(["late", "age", "label", "big"], 4_000))
    assert all(batch.num_rows <= 4_000 for _, batch in batches)
    assert [first for first, _ in batches] == list(range(0, rows, 4_000))
    table = pa.Table.from_batches([batch for _, batch in batches])
    assert table["age"][-1].as_py() == 2.5 and table["age"][7].as_py() == 7.0
    assert table["late"].to_pylist()[-3:] == [1, None, 7]  # "NaN" reads as missing
    assert table["big"][-1].as_py() == 2**63 + 5
    assert table["label"].to_pylist()[:2] == [None, "x"]
    monkeypatch.undo()  # one block holds the whole file: pyarrow's own inference holds
    native = CsvCatalogue.open(path)
    assert native.native and native.num_rows == rows
    assert str(native.schema.field("age").type) == "double"
    assert str(native.schema.field("late").type) == "int64"


def test_hive_partitioned_parquet_dataset(tmp_path) -> None:
    frame = faulty_catalogue().sort_values("cluster", kind="stable").reset_index(drop=True)
    flat = write_catalogue(tmp_path, frame)
    dataset = tmp_path / "dataset"
    pq.write_to_dataset(pa.Table.from_pandas(frame.drop(columns="cluster").assign(
        cluster=frame["cluster"]), preserve_index=False), dataset, partition_cols=["cluster"])
    catalogue = open_catalogue([dataset])
    assert isinstance(catalogue, JoinedCatalogue) and catalogue.num_rows == 120
    assert catalogue.schema.field("cluster").type == pa.string()
    assert "cluster" not in pq.read_schema(next(dataset.rglob("*.parquet"))).names
    profile = tmp_path / "profile.toml"  # group = "cluster", the partition key
    expected = catcheck.check(flat, profile, ["core", "clusters"], batch_rows=32)
    found = catcheck.check(dataset, profile, ["core", "clusters"], batch_rows=32)
    pd.testing.assert_frame_equal(found.flags, expected.flags)
    assert found.summary["rules"] == expected.summary["rules"]
    batch = next(catalogue.batches(["name", "cluster"], 1000))[1]
    assert batch.column(1).to_pylist() == ["C-001"] * batch.num_rows
    assert propose_profile(catalogue).group.column == "cluster"  # a sample across files


def test_a_plain_parquet_directory_stays_a_parquet_catalogue(tmp_path) -> None:
    frame = faulty_catalogue(40)
    (tmp_path / "parts").mkdir()
    write_catalogue(tmp_path, frame.iloc[:20], "parts/a.parquet")
    write_catalogue(tmp_path, frame.iloc[20:], "parts/b.pq")
    catalogue = open_catalogue([tmp_path / "parts"])
    assert isinstance(catalogue, ParquetCatalogue) and catalogue.num_rows == 20  # .parquet
    both = open_catalogue([tmp_path / "parts" / "a.parquet", tmp_path / "parts" / "b.pq"])
    assert isinstance(both, ParquetCatalogue) and both.num_rows == 40


def test_format_by_extension_and_unknown_extensions(tmp_path) -> None:
    for name, kind in (("a.FITS", "fits"), ("a.fits.gz", "fits"), ("a.tsv.gz", "tsv"),
                       ("a.xml", "votable"), ("a.ecsv", "ecsv"), ("a.pq", "parquet")):
        assert format_of(tmp_path / name) == kind
    parquet = write_catalogue(tmp_path, faulty_catalogue(10), "release.v2")
    assert format_of(parquet) == "parquet"  # Parquet's magic bytes
    (tmp_path / "notes.txt").write_text("Teff,logL\n")
    with pytest.raises(CatalogueError, match=r"unknown catalogue format '\.txt'") as info:
        open_catalogue([tmp_path / "notes.txt"])
    assert ".fits" in info.value.fix and ".csv" in info.value.fix


@pytest.mark.parametrize("suffix", ["fits", "vot", "ecsv"])
def test_missing_astropy_names_the_extra(tmp_path, monkeypatch, suffix) -> None:
    path = tmp_path / f"cat.{suffix}"
    path.write_text("not read")
    for name in ("astropy", "astropy.io", "astropy.io.fits", "astropy.io.votable",
                 "astropy.table"):
        monkeypatch.setitem(sys.modules, name, None)  # import now fails
    with pytest.raises(CatalogueError, match="needs astropy") as info:
        open_catalogue([path])
    assert 'pip install "catcheck[fits]"' in info.value.fix
    assert info.value.exit_code == EXIT_CATALOGUE


def test_unreadable_files_exit_3_with_one_line(tmp_path, capsys) -> None:
    pytest.importorskip("astropy")
    broken = tmp_path / "broken.fits"
    broken.write_bytes(b"SIMPLE  = nonsense")
    image = tmp_path / "image.fits"
    pytest.importorskip("astropy.io.fits").PrimaryHDU(np.zeros((3, 3))).writeto(image)
    (tmp_path / "profile.toml").write_text('id = "a"\n[quantities.teff]\ncolumn = "b"\n'
                                           'unit = "K"\n')
    for path, text in ((broken, "not a readable FITS table"),
                       (image, "holds no table HDU")):
        with pytest.raises(SystemExit) as done:
            main(["check", str(path), "--profile", str(tmp_path / "profile.toml"),
                  "--out", str(tmp_path / "report")])
        stderr = capsys.readouterr().err
        assert done.value.code == EXIT_CATALOGUE, stderr
        assert "Traceback" not in stderr and text in stderr
        assert len(stderr.strip().splitlines()) == 1
        assert not (tmp_path / "report").exists()


def test_votable_and_ecsv_keep_unit_ucd_and_description(tmp_path) -> None:
    table_module = pytest.importorskip("astropy.table")
    table = table_module.Table({"Teff": [5000.0, 6000.0], "name": ["a ", " b"]})
    table["Teff"].unit = "K"
    table["Teff"].description = "effective temperature"
    table["Teff"].meta["ucd"] = "phys.temperature.effective"
    table.write(tmp_path / "t.ecsv")
    votable = pytest.importorskip("astropy.io.votable")
    vot = votable.from_table(table)
    vot.get_first_table().fields[0].ucd = "phys.temperature.effective"
    vot.to_xml(str(tmp_path / "t.vot"))
    for name in ("t.ecsv", "t.vot"):
        catalogue = open_catalogue([tmp_path / name])
        assert column_metadata(catalogue.schema.field("Teff")) == {
            "unit": "K", "ucd": "phys.temperature.effective",
            "description": "effective temperature"}, name
        names = next(catalogue.batches(["name"], 10))[1].column(0).to_pylist()
        assert names == ["a", "b"]


def test_annotated_copy_of_a_fits_catalogue(tmp_path) -> None:
    frame = faulty_catalogue(30)
    write_catalogue(tmp_path, frame)
    write_astropy(frame, tmp_path / "cat.fits")
    result = catcheck.check(tmp_path / "cat.fits", tmp_path / "profile.toml", CORE,
                            out=tmp_path / "report", annotate=True)
    annotated = pq.read_table(tmp_path / "report" / "annotated.parquet")
    assert annotated.num_rows == 30 and result.summary["rows"] == 30
    assert annotated["name"].to_pylist() == frame["name"].tolist()
    assert [i for i, v in enumerate(annotated["qc_flags"].to_pylist()) if v] == [3]
