"""Segment geometry of the last-light measurement against published closed forms.

analyse.lastlight turns a channel's flux above the horizon into the depth of a
limb-darkened segment of the disc and takes the segment's true depth from its chord;
for a uniform disc these are the textbook circular segment and sagitta.
"""

from __future__ import annotations

import numpy as np

from analyse.lastlight import chord_depth, segment_fraction


def test_segment_fraction_of_a_uniform_disc_is_the_circular_segment_area():
    # E. W. Weisstein, "Circular Segment", MathWorld: area R^2 (theta - sin theta) / 2 with
    # theta = 2 arccos(1 - h / R); over the disc's area pi R^2. Closed forms on both sides:
    # agreement to rounding (1e-12).
    h = np.array([1e-4, 1e-3, 0.02, 0.3, 1.0, 1.7, 2.0])
    theta = 2.0 * np.arccos(1.0 - h)
    area = (theta - np.sin(theta)) / 2.0 / np.pi
    assert np.allclose(segment_fraction(h, 0.0), area, rtol=1e-12, atol=1e-15)



def test_chord_depth_is_the_sagitta():
    # E. W. Weisstein, "Sagitta", MathWorld: s = R - sqrt(R^2 - a^2 / 4) for a chord a.
    r, s = 230.0, np.array([0.5, 4.0, 60.0, 230.0])
    a = 2.0 * np.sqrt(2.0 * r * s - s**2)
    assert np.allclose(chord_depth(a, r) * r, s, rtol=1e-9)
    assert np.isnan(chord_depth(2.0 * r + 1.0, r))
