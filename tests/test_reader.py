"""Streaming reads: files, directories, globs, several files, row numbering, bad paths."""

from __future__ import annotations

import pytest
from factory import sun_like, write_catalogue

import catcheck
from catcheck.errors import CatalogueError
from catcheck.reader import ParquetCatalogue, resolve_sources

#: these tests are about the engine, not the physics: the core pack is enough
CORE = ["core"]


def split_catalogue(tmp_path, n_files=3, rows=100):
    frame = sun_like(rows * n_files)
    frame.loc[[5, rows + 7, 2 * rows + 9], "logL"] += 1  # one fault per file
    (tmp_path / "parts").mkdir()
    paths = []
    for i in range(n_files):
        part = frame.iloc[i * rows:(i + 1) * rows]
        paths.append(write_catalogue(tmp_path, part, f"parts/part-{i}.parquet",
                                     row_group_size=33))
    return frame, paths


def test_rows_numbered_across_files_in_given_order(tmp_path) -> None:
    _, paths = split_catalogue(tmp_path)
    profile = tmp_path / "profile.toml"
    in_order = catcheck.check(paths, profile, CORE).flags
    assert in_order["row"].tolist() == [5, 107, 209]
    assert in_order["id"].tolist() == ["S000005", "S000107", "S000209"]
    reversed_order = catcheck.check(paths[::-1], profile, CORE).flags
    assert reversed_order["row"].tolist() == [9, 107, 205]


def test_directory_and_glob_read_files_in_sorted_order(tmp_path) -> None:
    split_catalogue(tmp_path)
    profile = tmp_path / "profile.toml"
    by_dir = catcheck.check(tmp_path / "parts", profile, rules=CORE)
    by_glob = catcheck.check(str(tmp_path / "parts" / "part-*.parquet"), profile, rules=CORE)
    assert by_dir.flags["row"].tolist() == by_glob.flags["row"].tolist() == [5, 107, 209]
    assert by_dir.summary["rows"] == 300


def test_only_needed_columns_are_read(tmp_path) -> None:
    frame = sun_like(10)
    frame["unused"] = [[1, 2]] * 10  # a nested column the profile does not name
    path = write_catalogue(tmp_path, frame)
    catalogue = ParquetCatalogue.open([path])
    batches = list(catalogue.batches(["name", "Teff"], 4))
    assert [b.num_rows for _, b in batches] == [4, 4, 2]
    assert [first for first, _ in batches] == [0, 4, 8]
    assert batches[0][1].schema.names == ["name", "Teff"]


def test_missing_catalogue(tmp_path) -> None:
    with pytest.raises(CatalogueError, match="not found") as info:
        resolve_sources([tmp_path / "nope.parquet"])
    assert info.value.exit_code == 3


def test_directory_without_parquet(tmp_path) -> None:
    (tmp_path / "empty").mkdir()
    with pytest.raises(CatalogueError, match=r"no \.parquet"):
        resolve_sources([tmp_path / "empty"])


def test_glob_matching_nothing(tmp_path) -> None:
    with pytest.raises(CatalogueError, match="matches no file"):
        resolve_sources([str(tmp_path / "*.parquet")])


def test_corrupt_parquet(tmp_path) -> None:
    path = write_catalogue(tmp_path, sun_like(50))
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(CatalogueError, match="not a readable Parquet file"):
        ParquetCatalogue.open([path])


def test_files_with_clashing_schemas(tmp_path) -> None:
    frame = sun_like(10)
    first = write_catalogue(tmp_path, frame, "a.parquet")
    other = frame.assign(Teff=frame["Teff"].astype(str))
    second = write_catalogue(tmp_path, other, "b.parquet")
    with pytest.raises(CatalogueError, match=r"'Teff' is (large_)?string here but double"):
        catcheck.check([first, second], tmp_path / "profile.toml", rules=CORE)


def test_label_columns_read_as_dictionaries_with_the_same_values(tmp_path) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.table({"id": ["a", "b", "c", "d"], "phase": ["MS", None, "RGB", "MS"],
                      "cluster": pa.array(["7", "7", "9", None], pa.large_string()),
                      "count": [1, 2, 2, 1]})
    pq.write_table(table, tmp_path / "labels.parquet", row_group_size=3)
    catalogue = ParquetCatalogue.open([tmp_path / "labels.parquet"])
    labels = ["phase", "cluster", "count"]  # an integer column in the list is left as it is
    batches = [b for _, b in catalogue.batches(table.column_names, 2, dictionary=labels)]
    assert pa.types.is_dictionary(batches[0].schema.field("phase").type)
    assert pa.types.is_dictionary(batches[0].schema.field("cluster").type)
    assert batches[0].schema.field("id").type == pa.string()  # not asked for: plain
    assert batches[0].schema.field("count").type == pa.int64()
    for name in table.column_names:
        read = pa.chunked_array([b.column(name) for b in batches])
        if pa.types.is_dictionary(read.type):
            read = read.cast(pa.string())
        assert read.to_pylist() == table.column(name).to_pylist()
