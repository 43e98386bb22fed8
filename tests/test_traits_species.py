"""Species values through the whole path: import a trait table, reconcile
names against a tree, aggregate. Checked against published figures,
pandas on the raw data, and scipy."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.datasets import load_iris

from curation.imports.traits import import_traits
from curation.imports.trees import import_trees
from curation.names import reconcile_names
from curation.store import Store
from curation.traits import define_traits, species_values


def _tree_set(store: Store, tmp_path: Path, labels: list[str]) -> int:
    # A star tree over the species: topology does not matter for means.
    tree = tmp_path / "tree.nwk"
    tree.write_text("(" + ",".join(f"{t}:1" for t in labels) + ");\n")
    result = import_trees(store, tree)
    with store.reading() as session:
        from curation.store.models import TreeSet

        return session.query(TreeSet).filter_by(source_id=result.source_id).one().id


@pytest.fixture
def iris_frame() -> pd.DataFrame:
    data = load_iris(as_frame=True)
    frame = data.frame.rename(
        columns={
            "sepal length (cm)": "sepal_length",
            "sepal width (cm)": "sepal_width",
            "petal length (cm)": "petal_length",
            "petal width (cm)": "petal_width",
        }
    )
    frame["taxon"] = "Iris " + data.target_names[frame.pop("target")]
    return frame


def test_iris_species_values_agree_with_published_figures(
    store: Store, tmp_path: Path, iris_frame: pd.DataFrame
) -> None:
    # Iris measurements of Anderson (1935), published by Fisher (1936),
    # as scikit-learn bundles them; imported in cm with a raw scale.
    path = tmp_path / "iris.csv"
    iris_frame.to_csv(path, index=False)
    import_traits(store, path, default_unit="cm")
    tree_set = _tree_set(store, tmp_path, ["Iris_setosa", "Iris_versicolor", "Iris_virginica"])
    reconcile_names(store, tree_set)
    values = species_values(store, tree_set).set_index(["tip_label", "trait"])
    assert len(values) == 12
    # Independent computation: pandas groupby on the raw table.
    raw = iris_frame.groupby("taxon")
    for trait in ("sepal_length", "sepal_width", "petal_length", "petal_width"):
        for taxon, group in raw[trait]:
            row = values.loc[(taxon.replace(" ", "_"), trait)]
            assert row["n"] == 50
            assert row["mean"] == pytest.approx(group.mean(), abs=1e-12)
            assert row["sd"] == pytest.approx(group.std(ddof=1), abs=1e-12)
            assert row["median"] == pytest.approx(group.median(), abs=1e-12)
            # Standard error of the mean against scipy.stats.sem (ddof=1).
            assert row["se"] == pytest.approx(stats.sem(group.to_numpy()), abs=1e-12)
            assert len(row["measurement_ids"]) == 50
    # Published species means and SDs (Fisher 1936, Table I; recalled from
    # memory, to the printed three decimals): setosa sepal length 5.006,
    # SD 0.352; versicolor petal length 4.260; virginica petal width 2.026.
    assert values.loc[("Iris_setosa", "sepal_length"), "mean"] == pytest.approx(5.006, abs=5e-4)
    assert values.loc[("Iris_setosa", "sepal_length"), "sd"] == pytest.approx(0.352, abs=5e-4)
    assert values.loc[("Iris_versicolor", "petal_length"), "mean"] == pytest.approx(4.260, abs=5e-4)
    assert values.loc[("Iris_virginica", "petal_width"), "mean"] == pytest.approx(2.026, abs=5e-4)


def test_iris_in_mm_on_a_log_scale(store: Store, tmp_path: Path, iris_frame: pd.DataFrame) -> None:
    # Defined in mm on the ln scale: values convert by 10 (pint; NIST SP 811:
    # 1 cm = 10 mm exactly) and the mean is the mean of logs of mm values.
    define_traits(
        store,
        [{"name": "sepal_length", "kind": "continuous", "unit": "mm", "scale": "ln"}],
    )
    path = tmp_path / "iris.csv"
    iris_frame[["taxon", "sepal_length"]].to_csv(path, index=False)
    import_traits(store, path, default_unit="cm")
    tree_set = _tree_set(store, tmp_path, ["Iris_setosa", "Iris_versicolor", "Iris_virginica"])
    reconcile_names(store, tree_set)
    values = species_values(store, tree_set).set_index("tip_label")
    setosa = np.log(iris_frame.loc[iris_frame["taxon"] == "Iris setosa", "sepal_length"] * 10)
    assert values.loc["Iris_setosa", "unit"] == "mm"
    assert values.loc["Iris_setosa", "scale"] == "ln"
    assert values.loc["Iris_setosa", "mean"] == pytest.approx(setosa.mean(), abs=1e-12)
    assert values.loc["Iris_setosa", "se"] == pytest.approx(stats.sem(setosa), abs=1e-12)


def test_penguin_species_means(store: Store, tmp_path: Path) -> None:
    # Palmer penguins (Gorman, Williams and Fraser 2014; Horst, Hill and
    # Gorman 2020), the palmerpenguins package's table; NA values are
    # kept as missing measurements and left out of the means.
    from palmerpenguins import load_penguins

    penguins = load_penguins()
    table = penguins[["species", "bill_length_mm", "flipper_length_mm", "body_mass_g", "sex"]]
    table = table.assign(species="Pygoscelis " + table["species"].str.lower())
    path = tmp_path / "penguins.csv"
    table.to_csv(path, index=False)
    import_traits(store, path)
    tree_set = _tree_set(
        store, tmp_path, ["Pygoscelis_adelie", "Pygoscelis_chinstrap", "Pygoscelis_gentoo"]
    )
    reconcile_names(store, tree_set)
    values = species_values(store, tree_set).set_index(["tip_label", "trait"])
    reference = table.groupby("species")[["bill_length_mm", "flipper_length_mm", "body_mass_g"]]
    means = reference.mean()
    for column in means.columns:
        trait = column.rsplit("_", 1)[0]
        for species, mean in means[column].items():
            tip = species.replace(" ", "_")
            assert values.loc[(tip, trait), "mean"] == pytest.approx(mean, rel=1e-12)
    # Published means (recalled from memory, Horst et al. 2020 summaries):
    # Adelie body mass about 3700.7 g, Gentoo 5076.0 g, Chinstrap flipper 195.8 mm.
    assert values.loc[("Pygoscelis_adelie", "body_mass"), "mean"] == pytest.approx(3700.7, abs=0.1)
    assert values.loc[("Pygoscelis_gentoo", "body_mass"), "mean"] == pytest.approx(5076.0, abs=0.1)
    assert values.loc[("Pygoscelis_chinstrap", "flipper_length"), "mean"] == pytest.approx(
        195.8, abs=0.1
    )
