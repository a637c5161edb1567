"""The sweep spec: load and validate it, its parts (limits, inputs, values, adaptive), its digest and diff.

``load`` is the only code that reads spec and model files; everything after it works on the
frozen ``Spec``. ``identity`` fingerprints what decides a store's bytes and ``diff`` says what
changed between two specs, for the same-sweep check on resume.
"""

from typing import TYPE_CHECKING

from sweep import lazy

_NAMES = {
    "DEFAULT_MAX_EVENTS": "sweep.spec.loading",
    "DEFAULT_REPLICATES_PER_TASK": "sweep.spec.loading",
    "DEFAULT_SAMPLES": "sweep.spec.loading",
    "Spec": "sweep.spec.loading",
    "from_text": "sweep.spec.loading",
    "load": "sweep.spec.loading",
    "load_model": "sweep.spec.loading",
}
__all__ = sorted(_NAMES)
__getattr__, __dir__ = lazy.exports(__name__, _NAMES)

if TYPE_CHECKING:  # what type checkers and IDEs see
    from sweep.spec.loading import (DEFAULT_MAX_EVENTS, DEFAULT_REPLICATES_PER_TASK, DEFAULT_SAMPLES, Spec, from_text,
                                    load, load_model)
