"""Per-trait readiness diagnostics: how much the phylogeny matters for each
continuous trait, with one plain sentence per trait for the report.

:func:`trait_diagnostics` works on a tree's array view and one trait's
values; :func:`diagnose_traits` takes a stored tree and the species values
(one row per tip and trait, as the traits stage makes them) and returns
one :class:`TraitDiagnostics` per continuous trait. Nothing is written to
the store.

Documented handling of awkward input:

- tips without a value (or with NaN) are pruned, the tree is re-rooted at
  the most recent common ancestor of the rest, and the result says how
  many were pruned;
- values for labels that are not tips of the tree are ignored and noted;
- a constant trait gets its mean (with SE 0) and status ``constant``: no
  rate, likelihood or test is defined;
- two species: mean, rate and likelihoods only (status ``too_few_tips``);
  lambda and K need three, the branch-length check four;
- zero-length internal branches become polytomies; a tip on a zero-length
  branch is exact; two tips joined only by zero-length branches (a
  singular covariance) raise :class:`~curation.errors.InputError` from
  :func:`trait_diagnostics` and give status ``not_computed`` with the
  message in :func:`diagnose_traits`;
- a missing SE for a tip that has a value counts as 0 (noted);
- one contrast that carries most of the Brownian rate (typically a pair of
  sister tips on near-zero terminal branches whose values differ) is
  reported with the figures recomputed without its tips, and the sentence
  says the figures rest on those tips instead of advising a
  transformation of the branch lengths
  (:mod:`curation.diagnostics.influence`).
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Literal

import numpy as np
import pandas as pd
from pydantic import BaseModel

from curation.diagnostics.contrasts import AdequacyCheck, adequacy_of, contrast_table
from curation.diagnostics.fits import BrownianFit, LambdaFit, fit_brownian, fit_lambda
from curation.diagnostics.influence import Dominance, find_dominance
from curation.diagnostics.likelihood import BrownianPass, edge_variances
from curation.diagnostics.pruning import prepare_tree
from curation.diagnostics.signal import SignalK, blomberg_k
from curation.errors import InputError, Problem
from curation.findings import Finding, Severity
from curation.trees.arrays import TreeArrays

__all__ = [
    "MeasurementErrorDiagnostics",
    "TraitDiagnostics",
    "diagnose_traits",
    "diagnostics_frame",
    "trait_diagnostics",
    "DISCRETE_KINDS",
]

DISCRETE_KINDS = frozenset({"discrete", "categorical", "binary", "ordinal", "state"})
_SIGNIFICANCE = 0.05
_LISTED = 100


class MeasurementErrorDiagnostics(BaseModel):
    """The variants that add each species' squared SE to its terminal
    branch variance."""

    brownian: BrownianFit
    pagel_lambda: LambdaFit | None = None
    blomberg: SignalK | None = None


class TraitDiagnostics(BaseModel):
    """Phylogenetic readiness of one trait on one tree."""

    trait: str
    status: Literal["ok", "constant", "too_few_tips", "not_computed"]
    tips_on_tree: int
    tips_used: int
    tips_pruned: int
    pruned: list[str] = []
    ordinary_mean: float | None = None
    ordinary_se: float | None = None
    phylogenetic_mean: float | None = None
    phylogenetic_se: float | None = None
    rate_reml: float | None = None
    rate_ml: float | None = None
    loglik_ml: float | None = None
    loglik_reml: float | None = None
    pagel_lambda: LambdaFit | None = None
    blomberg: SignalK | None = None
    adequacy: AdequacyCheck | None = None
    dominance: Dominance | None = None
    with_error: MeasurementErrorDiagnostics | None = None
    notes: list[str] = []
    sentence: str = ""

    def findings(self) -> list[Finding]:
        """Return the diagnostics as findings (codes ``diagnostics.*``)."""
        out: list[Finding] = []
        subject = f"trait {self.trait}"
        if self.tips_pruned:
            out.append(
                Finding(
                    code="diagnostics.pruned_tips",
                    severity=Severity.info,
                    subject=subject,
                    message=f"{self.tips_pruned} tips without a value were pruned",
                    details={"tips": self.pruned},
                )
            )
        if self.status != "ok":
            out.append(
                Finding(
                    code=f"diagnostics.{self.status}",
                    severity=Severity.warning,
                    subject=subject,
                    message=self.sentence,
                    details={"notes": self.notes},
                )
            )
        d = self.dominance
        if d is not None:
            out.append(
                Finding(
                    code="diagnostics.dominated_by_tips" if d.tips else "diagnostics.dominated",
                    severity=Severity.warning,
                    subject=subject,
                    message=_dominance_clause(self.trait, d, f"the diagnostics of {self.trait}"),
                    details=d.model_dump(),
                )
            )
        a = self.adequacy
        if a is not None and _inadequate(self) == "branch lengths":
            out.append(
                Finding(
                    code="diagnostics.branch_lengths_inadequate",
                    severity=Severity.warning,
                    subject=subject,
                    message=(
                        "absolute standardised contrasts correlate with their standard "
                        f"deviations (r = {a.correlation:.2f}, "
                        f"p = {a.p_value:.2g})"
                    ),
                    details=a.model_dump(),
                )
            )
        return out


def _validate(
    arrays: TreeArrays, values: pd.Series, se: pd.Series | None, trait: str
) -> tuple[pd.Series, pd.Series | None, list[str]]:
    problems: list[Problem] = []
    notes: list[str] = []
    if not isinstance(values, pd.Series):
        raise InputError(
            f"values of trait {trait!r} must be a pandas Series indexed by tip label",
            field="values",
        )
    index = values.index.astype(str)
    duplicated = sorted(set(index[index.duplicated()]))
    if duplicated:
        problems.append(
            Problem(
                f"tip labels with more than one value: {', '.join(map(repr, duplicated[:10]))}",
                field="values",
                hint="aggregate to one value per species first (species_values)",
            )
        )
    numbers = pd.to_numeric(values, errors="coerce")
    bad = values[numbers.isna() & values.notna()]
    if len(bad):
        problems.append(
            Problem(
                f"{len(bad)} values are not numbers, e.g. {bad.iloc[0]!r} for {bad.index[0]!r}",
                field="values",
            )
        )
    infinite = numbers[np.isinf(numbers.to_numpy(dtype=float, na_value=np.nan))]
    if len(infinite):
        problems.append(
            Problem(
                f"{len(infinite)} values are infinite, e.g. for {infinite.index[0]!r}",
                field="values",
            )
        )
    se_numbers = None
    if se is not None:
        se_numbers = pd.to_numeric(pd.Series(se), errors="coerce")
        se_numbers.index = se_numbers.index.astype(str)
        negative = se_numbers[(se_numbers < 0) | np.isinf(se_numbers)]
        if len(negative):
            problems.append(
                Problem(
                    f"{len(negative)} standard errors are negative or infinite, e.g. "
                    f"{float(negative.iloc[0])!r} for {negative.index[0]!r}",
                    field="se",
                )
            )
    if problems:
        raise InputError(f"the values of trait {trait!r} cannot be used", problems=problems)
    numbers.index = index
    tips = set(arrays.tip_labels)
    off_tree = [label for label in numbers.index if label not in tips]
    if off_tree:
        notes.append(
            f"{len(off_tree)} values for labels that are not tips of the tree were ignored "
            f"(e.g. {off_tree[0]!r})"
        )
    numbers = numbers[numbers.index.isin(tips) & numbers.notna()]
    if se_numbers is not None:
        aligned = se_numbers.reindex(numbers.index)
        if aligned.isna().any():
            notes.append(f"{int(aligned.isna().sum())} species have no SE; it counts as 0")
        aligned = aligned.fillna(0.0)
        if (aligned > 0).any():
            se_numbers = aligned
        else:
            notes.append("every SE is 0, so the measurement-error variant is left out")
            se_numbers = None
    return numbers.astype(float), se_numbers, notes


def trait_diagnostics(
    arrays: TreeArrays,
    values: pd.Series,
    *,
    se: pd.Series | None = None,
    permutations: int = 1000,
    seed: int = 0,
    trait: str = "trait",
) -> TraitDiagnostics:
    """Return the phylogenetic readiness diagnostics of one trait.

    Args:
        arrays: the tree.
        values: one value per tip label (NaN or absent: pruned).
        se: species standard errors by tip label; when given, the
            measurement-error variants are computed too.
        permutations: permutations of the Blomberg's K test (0: none).
        seed: seed of the permutations.
        trait: name used in the result and its sentence.

    Returns:
        :class:`TraitDiagnostics`: GLS (Brownian) mean and SE beside the
        ordinary mean and naive SE; REML and ML rates and log-likelihoods;
        Pagel's lambda (Pagel 1999) with LR tests against 0 and 1;
        Blomberg's K (Blomberg, Garland and Ives 2003) with its permutation
        p-value; the contrasts' branch-length check (Garland, Harvey and
        Ives 1992); the measurement-error variants; notes and a sentence.

    Raises:
        InputError: values that are not numbers or are infinite, repeated
            labels, negative SEs, fewer than two tips with values, branch
            lengths missing or negative, or a singular covariance (tips
            joined by zero-length branches).
    """
    if permutations < 0:
        raise InputError(
            f"permutations must be 0 or more, not {permutations}", field="permutations"
        )
    numbers, se_numbers, notes = _validate(arrays, values, se, trait)
    tip_labels = arrays.tip_labels
    have = set(numbers.index)
    pruned = [label for label in tip_labels if label not in have]
    if pruned:
        notes.append(f"{len(pruned)} tips without a value were pruned from the tree")
    if len(numbers) < 2:
        raise InputError(
            f"trait {trait!r} has a value for {len(numbers)} tip(s) of the tree; "
            "the diagnostics need at least two",
            field="values",
            hint="check that the values are keyed by the tree's tip labels",
        )
    labels = sorted(have)
    y = numbers.reindex(labels).to_numpy(dtype=float)
    tree = prepare_tree(arrays, labels)
    n = len(y)
    result = TraitDiagnostics(
        trait=trait,
        status="ok",
        tips_on_tree=len(tip_labels),
        tips_used=n,
        tips_pruned=len(pruned),
        pruned=pruned[:_LISTED],
        ordinary_mean=float(y.mean()),
        ordinary_se=float(y.std(ddof=1) / math.sqrt(n)),
        notes=notes,
    )
    if np.ptp(y) == 0:
        result.status = "constant"
        result.phylogenetic_mean = float(y[0])
        result.phylogenetic_se = 0.0
        result.notes.append("the trait is constant: no rate, likelihood or test is defined")
        result.sentence = (
            f"{trait}: the value is the same ({y[0]:.4g}) in all {n} species, so there is "
            "no variation to analyse and the question of independence does not arise."
        )
        return result
    fit = fit_brownian(tree, y)
    result.phylogenetic_mean = fit.mean
    result.phylogenetic_se = fit.mean_se
    result.rate_reml = fit.rate_reml
    result.rate_ml = fit.rate_ml
    result.loglik_ml = fit.loglik_ml
    result.loglik_reml = fit.loglik_reml
    se_array = None if se_numbers is None else se_numbers.reindex(labels).to_numpy(dtype=float)
    if n >= 3:
        result.pagel_lambda = fit_lambda(tree, y)
        result.blomberg = blomberg_k(tree, y, permutations=permutations, seed=seed)
    else:
        result.status = "too_few_tips"
        result.notes.append("lambda and K need at least three species")
    if n >= 4:
        table = contrast_table(BrownianPass(tree, edge_variances(tree)), y)
        result.adequacy = adequacy_of(table.contrast, table.sd)
        if result.adequacy.note:
            result.notes.append(f"branch-length check: {result.adequacy.note}")
        result.dominance = find_dominance(arrays, tree, y, table)
    if se_array is not None:
        with_error = fit_brownian(tree, y, se=se_array)
        variant = MeasurementErrorDiagnostics(brownian=with_error)
        if n >= 3:
            variant.pagel_lambda = fit_lambda(tree, y, se=se_array)
            rate = max(with_error.rate_reml, 1e-300)
            variant.blomberg = blomberg_k(
                tree, y, tip_variance=se_array**2 / rate, permutations=permutations, seed=seed
            )
        result.with_error = variant
    result.sentence = _sentence(result)
    return result


def _fmt(value: float | None) -> str:
    return "n/a" if value is None else f"{value:.3g}"


def _sentence(d: TraitDiagnostics) -> str:
    """One plain sentence on what the figures mean for treating the species
    as independent data points."""
    n = d.tips_used
    if d.status == "too_few_tips":
        return (
            f"{d.trait}: only {n} species have values, too few to judge phylogenetic "
            "signal; a comparison of two species is a single independent contrast."
        )
    lam = d.pagel_lambda
    k = d.blomberg
    assert lam is not None and k is not None
    lam_signal = lam.p_vs_0 < _SIGNIFICANCE
    k_signal = k.p_value is not None and k.p_value < _SIGNIFICANCE
    figures = (
        f"Pagel's lambda = {lam.lam:.2f} (p = {lam.p_vs_0:.2g} against 0), "
        f"Blomberg's K = {k.k:.2f}"
        + (f" (permutation p = {k.p_value:.2g})" if k.p_value is not None else "")
    )
    ratio = (d.phylogenetic_se or 0.0) / d.ordinary_se if d.ordinary_se else None
    if ratio is not None and ratio >= 1:
        se_part = (
            f"the ordinary standard error of the mean ({_fmt(d.ordinary_se)}) is "
            f"{ratio:.1f} times smaller than the phylogenetic one ({_fmt(d.phylogenetic_se)})"
        )
    else:
        se_part = (
            f"the phylogenetic standard error of the mean ({_fmt(d.phylogenetic_se)}) "
            f"differs from the ordinary one ({_fmt(d.ordinary_se)})"
        )
    if lam_signal or k_signal:
        strength = "clear" if (lam_signal and k_signal) else "some"
        text = (
            f"{d.trait} ({n} species) shows {strength} phylogenetic signal ({figures}), "
            f"so species are not independent data points: {se_part}, and tests that treat "
            "species as independent will be overconfident, so use a phylogenetic method"
        )
    else:
        text = (
            f"{d.trait} ({n} species) shows no clear phylogenetic signal ({figures}), so "
            "treating species as independent is defensible for this trait, though "
            f"{se_part}"
        )
    dominance = d.dominance
    if dominance is not None:
        text += "; but " + _dominance_clause(d.trait, dominance)
    a = d.adequacy
    verdict = _inadequate(d)
    if a is not None and verdict == "one contrast":
        without = dominance.adequacy_without if dominance is not None else None
        rest = (
            f" (r = {without.correlation:.2f}, p = {without.p_value:.2g} without it)"
            if without is not None
            and without.p_value is not None
            and without.correlation is not None
            else ""
        )
        text += (
            f"; the branch-length check (r = {a.correlation:.2f}) rests on the same "
            f"contrast{rest}, so it is no reason to transform the branch lengths"
        )
    elif a is not None and verdict == "branch lengths":
        text += (
            "; the branch lengths do not standardise the contrasts (their absolute values "
            f"correlate with their standard deviations, r = {a.correlation:.2f}), so "
            "transform the branch lengths before using independent contrasts"
        )
    return text + "."


def _inadequate(d: TraitDiagnostics) -> str | None:
    """What a significant branch-length check (Garland, Harvey and Ives
    1992) says: 'branch lengths' when it calls for a transformation, 'one
    contrast' when it holds only with the dominant contrast in, ``None``
    when it is not significant."""
    a = d.adequacy
    if a is None or a.p_value is None or a.p_value >= _SIGNIFICANCE:
        return None
    if d.dominance is None:
        return "branch lengths"
    without = d.dominance.adequacy_without
    if without is not None and without.p_value is not None and without.p_value < _SIGNIFICANCE:
        return "branch lengths"
    return "one contrast"


def _span(values: list[float]) -> str:
    """'0.93', or '0.80 to 0.93' when the values differ at two decimals."""
    low, high = f"{min(values):.2f}", f"{max(values):.2f}"
    return low if low == high else f"{low} to {high}"


def _dominance_clause(trait: str, d: Dominance, what: str = "these figures") -> str:
    """Say which tips (or which split) one contrast rests on, what the
    figures are without them, and what to do."""
    rest_on = (
        "the sum of squared standardised contrasts on which the Brownian rate, the "
        "phylogenetic standard error and Blomberg's K rest (Blomberg, Garland and Ives 2003)"
    )
    if not d.tips:
        first, second = d.sides
        return (
            f"one split dominates {what}: the contrast between the clades of "
            f"{' to '.join(map(repr, first))} and {' to '.join(map(repr, second))} carries "
            f"{d.share:.0%} of {rest_on}, so they say more about that split than about {trait} "
            "across the tree"
        )
    if len(d.tips) == 2:
        text = f"the sister tips {d.tips[0]!r} and {d.tips[1]!r} dominate {what}"
        they, contrast, one = "they sit", "their contrast", "one of them"
    else:
        other = d.side_sizes[0] if d.sides[1] == d.tips else d.side_sizes[1]
        text = f"the tip {d.tips[0]!r} dominates {what}"
        they, one = "it sits", "it"
        contrast = f"its contrast with its sister group of {other} tips"
    near = bool(d.near_zero) and all(d.near_zero)
    if near:
        lengths = [f"{v:.3g}" for v in d.terminal_lengths]
        same = len(lengths) > 1 and len(set(lengths)) == 1
        shown = f"{lengths[0]} each" if same else " and ".join(lengths)
        text += (
            f": {they} on near-zero terminal branches ({shown}, below {d.near_zero_share:g} of "
            f"the tree's height) and {contrast}"
        )
    else:
        text += f": {contrast}"
    text += f" carries {d.share:.0%} of {rest_on}"
    if d.k_without:
        text += (
            f"; with {one} left out K = {_span(d.k_without)} and lambda = {_span(d.lambda_without)}"
        )
    these = "those" if len(d.tips) == 2 else "that"
    branches = "terminal branches" if len(d.tips) == 2 else "terminal branch"
    values = "values" if len(d.tips) == 2 else "value"
    advice = (
        f"lengthen {these} {branches} or check {these} {values}"
        if near
        else f"check {these} {values} and {branches}"
    )
    return text + f", so {advice} before reading K"


def _read_species(species: pd.DataFrame | str | Path) -> pd.DataFrame:
    if isinstance(species, pd.DataFrame):
        return species
    path = Path(species)
    if not path.exists():
        raise InputError(f"no species-values file at {str(path)!r}", file=str(path))
    try:
        return pd.read_csv(path)
    except (ValueError, pd.errors.ParserError) as exc:
        raise InputError(f"cannot read species values: {exc}", file=str(path)) from None


def diagnose_traits(
    store: object,
    tree_id: int,
    species: pd.DataFrame | str | Path | None = None,
    *,
    traits: list[str] | None = None,
    policy: str = "pool",
    permutations: int = 1000,
    seed: int = 0,
    use_se: bool = True,
) -> list[TraitDiagnostics]:
    """Return diagnostics for every continuous trait of ``species`` on the
    stored tree ``tree_id``, sorted by trait (and sex, when given).

    Args:
        store: an open :class:`~curation.store.Store`.
        tree_id: the tree to use.
        species: the species values (columns tip_label, trait, mean, and
            optionally kind, se, sex), as a DataFrame or a CSV path; when
            ``None`` they come from the traits stage's ``species_values``
            for the tree's set (with ``traits`` and ``policy``).
        use_se: compute the measurement-error variants where SEs exist.

    Raises:
        NotFoundError: no such tree.
        InputError: the frame lacks columns, no trait is continuous, or
            the species values cannot come from the store.
    """
    from curation.trees.stored import load_tree

    with store.reading() as session:  # type: ignore[attr-defined]
        tree_row, arrays = load_tree(session, tree_id)
        tree_set_id = tree_row.tree_set_id
    if species is None:
        try:
            from curation.traits import species_values  # type: ignore[attr-defined]
        except ImportError:
            raise InputError(
                "this version cannot compute species values from the store",
                field="species",
                hint="give the species values as a CSV file (--values)",
            ) from None
        species = species_values(store, tree_set_id, traits=traits, policy=policy)
    frame = _read_species(species)
    missing = [c for c in ("tip_label", "trait", "mean") if c not in frame.columns]
    if missing:
        raise InputError(
            f"the species values lack the columns {', '.join(missing)}",
            field="species",
            hint="give columns tip_label, trait, mean (and se, kind, sex if known)",
        )
    frame = frame.copy()
    if traits is not None:
        frame = frame[frame["trait"].isin(traits)]
    if "kind" in frame.columns:
        frame = frame[~frame["kind"].astype(str).str.lower().isin(DISCRETE_KINDS)]
    frame["mean"] = pd.to_numeric(frame["mean"], errors="coerce")
    keys = ["trait"]
    if "sex" in frame.columns and frame["sex"].notna().any():
        frame["sex"] = frame["sex"].astype(object).where(frame["sex"].notna(), "")
        keys.append("sex")
    frame = frame.groupby(keys, sort=True).filter(lambda g: g["mean"].notna().any())
    if frame.empty:
        raise InputError(
            "no continuous trait with values to diagnose",
            field="species",
            hint="check the trait names (--trait) and that the traits are continuous",
        )
    results: list[TraitDiagnostics] = []
    for key, group in frame.groupby(keys, sort=True):
        parts = key if isinstance(key, tuple) else (key,)
        name = str(parts[0]) + (f" [{parts[1]}]" if len(parts) > 1 and parts[1] else "")
        values = pd.Series(group["mean"].to_numpy(), index=group["tip_label"].astype(str))
        se = None
        if use_se and "se" in group.columns:
            se_values = pd.to_numeric(group["se"], errors="coerce")
            if (se_values > 0).any():
                se = pd.Series(se_values.to_numpy(), index=values.index)
        try:
            results.append(
                trait_diagnostics(
                    arrays, values, se=se, permutations=permutations, seed=seed, trait=name
                )
            )
        except InputError as exc:
            results.append(
                TraitDiagnostics(
                    trait=name,
                    status="not_computed",
                    tips_on_tree=len(arrays.tip_labels),
                    tips_used=0,
                    tips_pruned=0,
                    notes=[exc.describe()],
                    sentence=f"{name}: the diagnostics could not be computed: {exc.message}.",
                )
            )
    return results


def diagnostics_frame(results: list[TraitDiagnostics]) -> pd.DataFrame:
    """Return one row per trait with the headline figures (rounded for
    reading; the models hold full precision), for tables and reports."""

    def r(value: float | None, digits: int = 4) -> float | None:
        return None if value is None else float(f"{value:.{digits}g}")

    rows = []
    for d in results:
        lam, k, a = d.pagel_lambda, d.blomberg, d.adequacy
        rows.append(
            {
                "trait": d.trait,
                "status": d.status,
                "species": d.tips_used,
                "pruned": d.tips_pruned,
                "mean": r(d.ordinary_mean),
                "naive_se": r(d.ordinary_se),
                "phylo_mean": r(d.phylogenetic_mean),
                "phylo_se": r(d.phylogenetic_se),
                "rate_reml": r(d.rate_reml),
                "lambda": None if lam is None else round(lam.lam, 3),
                "p_lambda_0": None if lam is None else r(lam.p_vs_0, 2),
                "p_lambda_1": None if lam is None else r(lam.p_vs_1, 2),
                "K": None if k is None else round(k.k, 3),
                "p_K": None if k is None else k.p_value,
                "contrast_r": None
                if a is None or a.correlation is None
                else round(a.correlation, 3),
                "p_contrast": None if a is None or a.p_value is None else r(a.p_value, 2),
            }
        )
    return pd.DataFrame(rows)
