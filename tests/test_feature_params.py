"""The feature-stage keys of a parameter set: sets without them still build, and each bad value
is refused with a reason that names what is wrong."""
import json
from pathlib import Path

import pytest

from firmware_py.dsp import feature_index as fi
from firmware_py.run import params as pm
from host_tools.data.bearing import BEARING_6205, orders_q12

PROFILE = json.loads((Path(__file__).resolve().parents[1] / "boards" / "desk.json").read_text())
GOOD = {"fc_speed_lo_q8": 20 * 256, "fc_speed_hi_q8": 30 * 256, "fc_vane": 6,
        "fc_env_band": [128, 192], "fc_bear_q12": orders_q12(BEARING_6205)}


def test_a_set_without_the_new_keys_builds_with_them_off():
    core = pm.feature_core(pm.factory(PROFILE), PROFILE)
    assert not core.speed.on and not core.env.on and core.orders.vane == 0
    assert core.per == fi.per_axis(len(pm.factory(PROFILE)["fc_bands"]))


def test_a_set_with_every_key_builds_them():
    core = pm.feature_core(dict(pm.factory(PROFILE), **GOOD), PROFILE)
    assert core.speed.on and core.env.on and core.orders.vane == 6


@pytest.mark.parametrize("over, says", [
    ({"fc_vane": 2.5}, "fc_vane must be an integer"),
    ({"fc_env_band": "128-192"}, "fc_env_band must be a list"),
    ({"fc_speed_lo_q8": 40 * 256}, "0 < lo < hi"),
    ({"fc_speed_lo_q8": 10 * 256}, "below 2 bins"),
    ({"fc_speed_hi_q8": 600 * 256}, "3x of the top speed"),
    ({"fc_vane": 65}, "vane count"),
    ({"fc_vane": 60}, "vane pass at the top speed"),
    ({"fc_env_band": [128]}, "envelope band must be"),
    ({"fc_env_band": [190, 192]}, "lo + 4 <= hi"),
    ({"fc_env_band": [10, 250]}, "wider than fs/4"),
    ({"fc_bear_q12": [1, 2, 3]}, "bearing orders must be"),
    ({"fc_bear_q12": [14684, 22180, 9655, 0]}, "(0, 64)"),
    ({"fc_bear_q12": [14684, 22180 * 8, 9655, 1631]}, "beyond fs/4"),
])
def test_bad_values_are_refused_with_the_reason(over, says):
    p = dict(pm.factory(PROFILE), **GOOD)
    p.update(over)
    with pytest.raises(ValueError) as e:
        pm.build(p, PROFILE)
    assert says in str(e.value)
