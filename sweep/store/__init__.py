"""The results store, one Zarr (format 3) directory per sweep, and what keeps it honest.

``layout`` creates a store and owns its metadata; ``blocks`` writes task blocks, their checksums
and the completion record (``chunks`` is the fast chunk writer behind ``write_block``);
``lock``, ``claims`` and ``records`` let one client or many shards write it; ``integrity``
checks that it is the same sweep and undamaged; ``status`` reports on it; ``durable`` is the one fsync helper; ``export`` writes it out as files.

The names below are the store's contract for the rest of the package.
"""

from typing import TYPE_CHECKING

from sweep import lazy

_NAMES = {
    "BUILDING": "sweep.store.layout",
    "CHECKSUMS": "sweep.store.layout",
    "COORDINATES": "sweep.store.layout",
    "DATA_ARRAYS": "sweep.store.layout",
    "FORMAT_VERSION": "sweep.store.layout",
    "INCOMPLETE": "sweep.store.layout",
    "OBSERVABLES": "sweep.store.layout",
    "data_arrays": "sweep.store.layout",
    "with_observables": "sweep.store.observed",
    "DamagedDone": "sweep.store.layout",
    "attributes": "sweep.store.layout",
    "brief": "sweep.store.layout",
    "check_claimable": "sweep.store.layout",
    "consolidate": "sweep.store.layout",
    "counts_dtype": "sweep.store.layout",
    "create": "sweep.store.layout",
    "exists": "sweep.store.layout",
    "incomplete": "sweep.store.layout",
    "is_ours": "sweep.store.layout",
    "open_dataset": "sweep.store.layout",
    "store_id": "sweep.store.layout",
    "versions": "sweep.store.layout",
    "write_coordinates": "sweep.store.layout",
    "chunk_file": "sweep.store.blocks",
    "finish_run": "sweep.store.blocks",
    "set_attributes": "sweep.store.blocks",
    "has_checksums": "sweep.store.blocks",
    "read_checksums": "sweep.store.blocks",
    "read_done": "sweep.store.blocks",
    "read_done_array": "sweep.store.blocks",
    "record_failures": "sweep.store.blocks",
    "recreate_done": "sweep.store.blocks",
    "remove_partials": "sweep.store.blocks",
    "trailing_checksum": "sweep.store.blocks",
    "write_block": "sweep.store.blocks",
    "write_checksums": "sweep.store.blocks",
    "write_done": "sweep.store.blocks",
}
__all__ = sorted(_NAMES)
__getattr__, __dir__ = lazy.exports(__name__, _NAMES)

if TYPE_CHECKING:  # what type checkers and IDEs see
    from sweep.store.layout import (BUILDING, CHECKSUMS, COORDINATES, DATA_ARRAYS, FORMAT_VERSION, INCOMPLETE,
                                    DamagedDone, attributes, brief, check_claimable, consolidate, counts_dtype, create, exists,
                                    incomplete, is_ours, open_dataset, store_id, versions, write_coordinates)
    from sweep.store.layout import OBSERVABLES, data_arrays
    from sweep.store.observed import with_observables
    from sweep.store.blocks import (chunk_file, finish_run, has_checksums, read_checksums, read_done, read_done_array,
                                    record_failures, recreate_done, remove_partials, set_attributes, trailing_checksum,
                                    write_block,
                                    write_checksums, write_done)
