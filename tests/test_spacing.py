import pytest

from ctpore.errors import InputError
from ctpore.spacing import as_spacing_um, voxel_volume_um3


@pytest.mark.parametrize("value, expected", [
    (5, (5.0, 5.0, 5.0)), ("12,10,10", (12.0, 10.0, 10.0)), ([2, 1, 1], (2.0, 1.0, 1.0)),
    ("7.5", (7.5, 7.5, 7.5)),
])
def test_forms(value, expected):
    assert as_spacing_um(value) == expected


@pytest.mark.parametrize("value", [None, "a,b,c", [1, 2], 0, -1, float("nan"), "1,2,3,4"])
def test_rejects(value):
    with pytest.raises(InputError):
        as_spacing_um(value)


def test_voxel_volume():
    assert voxel_volume_um3((12, 10, 10)) == 1200.0
