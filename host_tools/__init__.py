"""edgevib host side (CPython): recordings, training, replay, link to the gateway."""
