"""Settings shared by the prioritisation steps: patch pairs named in a study."""

from ...analyses.priority import pair_nodes
from ...errors import ConfigError, InputError

__all__ = ["check_pair_list", "resolve_pairs", "share_in_unit_interval"]


def share_in_unit_interval(value):
    return None if 0.0 < value <= 1.0 else "must be greater than 0 and at most 1"


def check_pair_list(value):
    """Schema check: a list of [patch, patch] pairs of whole numbers."""
    for pair in value:
        if (not isinstance(pair, list) or len(pair) != 2
                or not all(isinstance(p, int) and not isinstance(p, bool) for p in pair)):
            return (f"each pair must be a list of two patch labels such as [1, 2]; got {pair!r}. "
                    "Write for example pairs = [[1, 2], [3, 5]]")
        if pair[0] == pair[1]:
            return f"the pair {pair!r} names one patch twice; a pair needs two different patches"
    return None


def resolve_pairs(ctx, pairs, key):
    """Pair labels -> node pairs, or None for 'every pair' when the list is empty.

    Raises ConfigError naming the study file and the key when a label is no patch.
    """
    if not pairs:
        return None
    try:
        return pair_nodes(ctx.graph, pairs)
    except InputError as exc:
        raise ConfigError(f"{ctx.study.path or 'study'}: '{key}': {exc} "
                          "Use labels of the patch raster or points file.") from None
