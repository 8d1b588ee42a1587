"""Fixed sentences the commands print under their tables (wrapped to the terminal when printed)."""

from __future__ import annotations

CAUTIONS = ("Cautions: an association in an embedding is not proof of discrimination; word lists encode "
            "choices; small corpora give unstable numbers; consequential decisions belong with qualified "
            "reviewers and the applicable law.")

ESTIMATE_NOTE = ("Contributions are estimates of the change if the source or document were removed (counts exact, "
                 "model subspace held fixed); only the verification rows are measured by retraining.")

DRIFT_LEGEND = ("gap: mean association of targets_x minus targets_y (trend and decomposition use it; the effect "
                "size saturates); slope: gap per decade; mix_part: change due to the mix of sources, "
                "within_part: change inside the sources (the later period reweighted to the earlier mix).")


def measure_legend(std_convention: str, bootstrap: int) -> str:
    """What the columns of a measure summary mean, given how it was measured."""
    return (f"\neffect_size: WEAT d, {std_convention}; p_value: one-sided permutation; "
            f"interval: {bootstrap} document-bootstrap replicates (percentile 2.5-97.5).\n"
            "Cohen's conventions: |d| 0.2 small, 0.5 medium, 0.8 large; |d| <= 2 for equal set sizes.\n")
