"""Label metrics (see :mod:`imputelab.metrics.scores`)."""

from __future__ import annotations

from typing import Any

from imputelab.metrics._common import (
    _accuracy_codes,
    _encode,
    _macro_f1_codes,
    _total_variation_codes,
    shared_doc,
)

__all__ = ["accuracy", "macro_f1", "pfc", "total_variation"]


@shared_doc
def accuracy(true: Any, filled: Any) -> float:
    """Share of hidden cells filled with the right label.

{pair_labels}

{returns_float}
        Fraction of positions where the labels are equal; nan when ``n == 0``.

{raises_labels}

    Examples
    --------
    >>> accuracy(["a", "b", "b", "c"], ["a", "b", "c", "c"])
    0.75
    """
    t, f, _ = _encode(true, filled)
    return _accuracy_codes(t, f)


@shared_doc
def pfc(true: Any, filled: Any) -> float:
    """Proportion of falsely classified hidden cells, ``1 - accuracy``.

{pair_labels}

{returns_float}
        Fraction of positions where the labels differ; nan when ``n == 0``.

{raises_labels}

    Examples
    --------
    >>> pfc(["a", "b", "b", "c"], ["a", "b", "c", "c"])
    0.25
    """
    return 1.0 - accuracy(true, filled)


@shared_doc
def macro_f1(true: Any, filled: Any) -> float:
    """F1 score averaged with equal weight over every label in ``true`` or ``filled``.

    A label that is never filled correctly scores 0, including labels that appear only in
    ``filled``; this matches ``sklearn.metrics.f1_score(average="macro", zero_division=0)``.

{pair_labels}

{returns_float}
        Macro-averaged F1 in [0, 1]; nan when ``n == 0``.

{raises_labels}

    Examples
    --------
    >>> macro_f1(["a", "a", "b", "b"], ["a", "a", "a", "b"])
    0.7333333333333334
    """
    return _macro_f1_codes(*_encode(true, filled))


@shared_doc
def total_variation(true: Any, filled: Any) -> float:
    """Total variation distance between the label frequencies of hidden and filled cells.

    ``0.5 * sum_k |p_true(k) - p_filled(k)|`` over the union of labels: 0 when the filled
    labels have the same frequencies as the hidden ones (in any order), 1 when the two
    share no label.

{pair_labels}

{returns_float}
        Distance in [0, 1]; nan when ``n == 0``.

{raises_labels}

    Examples
    --------
    >>> total_variation(["a", "a", "b", "c"], ["a", "b", "b", "b"])
    0.5
    """
    return _total_variation_codes(*_encode(true, filled))
