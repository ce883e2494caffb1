"""Settings shared by the study steps: patch ids and pairs of patches named in a study, and shares."""

from ...analyses.priority import pair_nodes
from ...errors import ConfigError, InputError
from ..schema import close_match

__all__ = ["patch_id_list", "check_pair_list", "patch_ids_or_all", "resolve_pairs", "share_in_unit_interval",
           "pair_map", "with_patch_codes"]


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


def _is_patch_id(value):
    return (isinstance(value, int) and not isinstance(value, bool)) or (isinstance(value, str) and value.strip())


def patch_id_list(value):
    """Schema check: a list of patch ids: whole numbers, or the text ids of patches (or zones) that have them."""
    if not all(_is_patch_id(v) for v in value):
        return ('must be a list of patch ids, such as [1, 3], or of text ids where the patches have them, '
                'such as ["Aldbrook", "Hollin"]')
    return None


def check_pair_list(value):
    """Schema check: a list of [patch, patch] pairs of two different patch ids."""
    for pair in value:
        if not (isinstance(pair, list) and len(pair) == 2 and patch_id_list(pair) is None):
            return (f"each pair must be a list of two patch ids such as [1, 2] (or text ids such as "
                    f'["Aldbrook", "Hollin"]); got {pair!r}. Write for example pairs = [[1, 2], [3, 5]]')
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


def with_patch_codes(section, settings, patches, where, study=None):
    """A step's settings with text patch ids turned into landflow's numeric patch codes.

    Patches (or zones) read with text ids are numbered 1, 2, ... in sorted order of
    their text; a study may name them by their text in any key that holds patch ids
    or pairs. Numbers are taken as codes as they are. ``where`` is the step's table
    name (``analyses.NAME``) and ``study`` the study file, for messages.

    Raises
    ------
    ConfigError
        A text id that names no patch (with the close match), or text ids for
        patches that have numeric ids.
    """
    code_of = {str(name): int(code) for code, name in (patches.names or {}).items()}
    source = patches.source
    head = f"{study or 'study'}: '{where}"

    def code(value, key):
        if not isinstance(value, str):
            return value
        if not code_of:
            raise ConfigError(f"{head}.{key}' names {value!r}, but the patches of {source} have numeric ids; "
                              "name them by number, such as [1, 3].")
        if value not in code_of:
            raise ConfigError(f"{head}.{key}' names {value!r}, which is no patch id.{close_match(value, code_of)} "
                              f"The patches of {source} are {', '.join(map(repr, code_of))}.")
        return code_of[value]

    out = dict(settings)
    for key, spec in section.keys.items():
        value = settings.get(key)
        if spec.check is patch_id_list and value:
            out[key] = [code(v, key) for v in value]
        elif spec.check is check_pair_list and value:
            out[key] = [[code(v, key) for v in pair] for pair in value]
    return out
