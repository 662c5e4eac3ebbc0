"""Suite-wide test settings: no test may depend on wall-clock time, so hypothesis's per-example
deadline is off everywhere (a loaded 2-core machine must not turn a slow example into a failure)."""
from hypothesis import settings

settings.register_profile("edgevib", deadline=None)
settings.load_profile("edgevib")
