"""Settings checks shared by the absorbing-walk study steps."""

from ...errors import InputError


def patch_id_list(value):
    """Key check: a list of whole patch ids."""
    if not all(isinstance(v, int) and not isinstance(v, bool) for v in value):
        return "must be a list of whole-number patch ids, such as [1, 3]"
    return None


def patch_pair_list(value):
    """Key check: a list of [A, B] pairs of different patch ids."""
    for pair in value:
        if not (isinstance(pair, list) and len(pair) == 2 and patch_id_list(pair) is None):
            return f"each entry must be a pair [A, B] of patch ids, such as [[1, 2], [3, 1]]; got {pair!r}"
        if pair[0] == pair[1]:
            return (f"the pair {pair!r} names the same patch twice; a hitting probability needs two different "
                    "patches (A before B)")
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
