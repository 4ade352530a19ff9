"""The version of ohmgraph's HDF5 layout, shared by every HDF5 writer and reader.

Writers stamp ``layout_version`` (:data:`LAYOUT_VERSION`) on the file root and on every result
group; readers accept every version up to their own (:func:`check_layout_version`) and refuse a
newer one with a message, never by misreading it.

Versions
--------
1
    The solution store (``/nodes``, ``/branches``, ``/checks``, ``/timings``); result groups
    carried no version (read as 1).
2
    Every result group (``/resistance``, ``/comparison``, ``/diagnosis``, ``/tolerance``) is
    written by :mod:`ohmgraph.io.result_store` with ``layout_version`` and provenance
    (``tool_version``, ``created``, input file names and SHA-256, ``command`` and
    ``command_options``); every dataset is chunked with the Fletcher-32 checksum filter and
    the root attributes are sealed by a SHA-256 digest (``attrs_sha256``).
"""

from __future__ import annotations

from ohmgraph.io.errors import InputError

LAYOUT_VERSION = 2
FIRST_LAYOUT_VERSION = 1      # files and groups without the attribute


def check_layout_version(where: str, attrs) -> int:
    """The layout version in ``attrs`` (1 when absent); refuse one newer than this reader.

    Parameters
    ----------
    where : str
        File (and group) for the message.
    attrs : mapping
        HDF5 attributes of the file root or a group.

    Raises
    ------
    InputError
        If the version is not a whole number or is newer than :data:`LAYOUT_VERSION`.
    """
    version = attrs.get("layout_version", FIRST_LAYOUT_VERSION)
    try:
        number = int(version)
    except (TypeError, ValueError):
        number = None
    if number is None or number != version or number < FIRST_LAYOUT_VERSION:
        raise InputError(f"{where}: layout_version {version!r} is not a layout version")
    if number > LAYOUT_VERSION:
        raise InputError(f"{where}: written with layout version {number} by a newer ohmgraph; "
                         f"this one reads versions {FIRST_LAYOUT_VERSION} to {LAYOUT_VERSION}")
    return number
