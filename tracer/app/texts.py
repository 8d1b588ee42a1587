"""Fixed sentences the commands print under their tables (wrapped to the terminal when printed)."""

from __future__ import annotations

CAUTIONS = ("Cautions: an association in an embedding is not proof of discrimination; word lists encode "
            "choices; small corpora give unstable numbers; consequential decisions belong with qualified "
            "reviewers and the applicable law.")

ESTIMATE_NOTE = ("Contributions are estimates of the change if the source or document were removed (counts exact, "
                 "model subspace held fixed); only the verification rows are measured by retraining.")

DRIFT_LEGEND = ("gap: mean association of targets_x minus targets_y (trend and decomposition use it; the effect "
                "size saturates); slope: gap per decade; mix_part: change due to the mix of sources, "
                "within_part: change inside the sources (averaged over reweighting each period to the other's mix, so the parts "
                "add up to the change); mix_share: mix_part / change (outside 0..1 when the parts pull apart).")


def measure_legend(std_convention: str, bootstrap: int) -> str:
    """What the columns of a measure summary mean, given how it was measured."""
    return (f"\neffect_size: WEAT d, {std_convention}; p_value: one-sided permutation; "
            "q_value: Benjamini-Hochberg over every p-value in this table; "
            f"interval: 95%, {bootstrap} document-bootstrap replicates (standard error, t quantile, "
            "centred on the estimate).\n"
            "Cohen's conventions: |d| 0.2 small, 0.5 medium, 0.8 large; |d| <= 2 for equal set sizes.\n")
