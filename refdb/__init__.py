"""refdb: open powder X-ray diffraction phase identification.

The public Python API is re-exported here as it lands; see DEVELOPERS.md.
"""

__version__ = "0.1.0"

from refdb.errors import InputError, LibraryError, RefdbError, SchemaError  # noqa: E402
from refdb.radiation import Radiation, radiation_for  # noqa: E402

__all__ = [
    "InputError",
    "LibraryError",
    "Radiation",
    "RefdbError",
    "SchemaError",
    "__version__",
    "radiation_for",
]
