"""Suite-wide test settings.

Hypothesis: one registered profile, loaded for every test, with the per-example deadline off. A
deadline is a wall-clock limit (200 ms by default), so on a loaded machine a correct test failed at
random; no test here may depend on how fast the host runs (speed is measured by `edgevib bench`).
Tests keep their own max_examples; a @settings() on a test inherits deadline=None from here.
"""
from hypothesis import settings

settings.register_profile("edgevib", deadline=None, derandomize=False, print_blob=True)
settings.load_profile("edgevib")
