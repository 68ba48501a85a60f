"""Band injection placements and the differenced recovery."""

import numpy as np

from pipeline.spectra.apertures import aperture_weights
from pipeline.rates.band_injection import ring_positions


def test_positions_fit_and_spread_around_the_nucleus():
    pos = ring_positions((48, 48), 24.0, 23.5, 12.0)
    assert pos[0] == (24.0, 23.5) and len(pos) == 5
    for x, y in pos:
        aperture_weights((48, 48), x, y, 12.0)            # raises if the aperture does not fit
    offsets = [np.hypot(x - 24.0, y - 23.5) for x, y in pos[1:]]
    assert all(o >= 0.25 * 12.0 - 1e-9 for o in offsets)
    # four different directions (one per diagonal)
    angles = sorted(round(float(np.degrees(np.arctan2(y - 23.5, x - 24.0)))) % 360 for x, y in pos[1:])
    assert angles == [45, 135, 225, 315]


def test_no_room_leaves_only_the_nucleus():
    assert ring_positions((24, 24), 12.0, 12.0, 11.4) == [(12.0, 12.0)]


def test_placements_stay_where_the_cube_holds_data():
    # an IFU field with a NaN border 10 pixels wide: every placement's aperture lies on finite pixels
    # (reference: the footprint itself, checked pixel by pixel with the aperture's own overlap weights)
    import numpy as np

    from pipeline.rates.band_injection import ring_positions
    from pipeline.spectra.apertures import aperture_weights

    shape = (40, 40)
    footprint = np.zeros(shape, dtype=bool)
    footprint[10:30, 10:30] = True
    free = ring_positions(shape, 20.0, 20.0, 4.0)
    kept = ring_positions(shape, 20.0, 20.0, 4.0, footprint=footprint)
    assert len(kept) == 5 and kept[0] == (20.0, 20.0)
    for x, y in kept:
        ap = aperture_weights(shape, x, y, 4.0)
        assert np.all(footprint[ap.ys, ap.xs][ap.weights > 0])
    # without the footprint the diagonal placements reach into the border
    assert any(not np.all(footprint[a.ys, a.xs][a.weights > 0])
               for a in (aperture_weights(shape, x, y, 4.0) for x, y in free))
