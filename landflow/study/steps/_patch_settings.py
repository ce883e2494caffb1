"""Settings shared by the study steps: patch ids and pairs of patches named in a study, and shares."""

from ...analyses.priority import pair_nodes
from ...errors import ConfigError, InputError

__all__ = ["patch_id_list", "check_pair_list", "patch_ids_or_all", "resolve_pairs", "share_in_unit_interval",
           "pair_map"]


def pair_map(a, b, name):
    """Path of one of a pair's maps: every map of patches a and b lives in ``pair_maps/<low>-<high>/``.

    ``a`` and ``b`` are patch ids; the folder orders them, so both directions of a
    pair share one folder (``pair_map(6, 2, "current.tif")`` is
    ``pair_maps/2-6/current.tif``).
    """
    low, high = sorted((a, b), key=lambda p: (str(type(p)), p))
    return f"pair_maps/{low}-{high}/{name}"


def share_in_unit_interval(value):
    return None if 0.0 < value <= 1.0 else "must be greater than 0 and at most 1"


def patch_id_list(value):
    """Schema check: a list of whole patch ids."""
    if not all(isinstance(v, int) and not isinstance(v, bool) for v in value):
        return "must be a list of whole-number patch ids, such as [1, 3]"
    return None


def check_pair_list(value):
    """Schema check: a list of [patch, patch] pairs of two different whole numbers."""
    for pair in value:
        if not (isinstance(pair, list) and len(pair) == 2 and patch_id_list(pair) is None):
            return (f"each pair must be a list of two patch labels such as [1, 2]; got {pair!r}. "
                    "Write for example pairs = [[1, 2], [3, 5]]")
        if pair[0] == pair[1]:
            return f"the pair {pair!r} names the same patch twice; a pair needs two different patches"
    return None


def patch_ids_or_all(ctx, wanted, key):
    """The requested patch ids (all patches when empty), each checked against the landscape's patches.

    Steps call it from ``check`` too, so an unknown id stops the run before any solve.
    """
    known = [int(p) for p in ctx.graph.patch_ids]
    if not wanted:
        return known
    unknown = [p for p in wanted if p not in known]
    if unknown:
        raise InputError(f"{ctx.study.path or 'study'}: '{key}' names unknown patch id(s) {', '.join(map(str, unknown))}; "
                         f"the patches are {', '.join(map(str, known))}. Use ids of the patch raster or points file.")
    return list(wanted)


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
