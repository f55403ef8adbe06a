"""``splatter check``'s border warnings see the smoke the render composites."""

from types import SimpleNamespace

import numpy as np

import splatter.check as check_module
from splatter.look.records import ImageSpec, LookSpec, ShadingSpec
from splatter.view.camera import Camera


def _puff_at_the_edge(deform):
    # One puff centred on the right edge of a 64 px frame (view width 4: 16 px per unit).
    return SimpleNamespace(pos=np.array([[2.0, 0.0, 0.0]]), size=np.array([0.1]), aspect=np.ones(1),
                           quat=np.array([[1.0, 0.0, 0.0, 0.0]]), vel=np.zeros((1, 3)), stretch=np.zeros(1),
                           opacity=np.array([0.5]), density=np.ones(1), deform=deform)


def test_a_thinned_puff_at_the_border_is_judged_by_the_opacity_it_is_drawn_with(monkeypatch):
    # A puff's rim is a visible cut when its peak opacity reaches VISIBLE_ALPHA at
    # the footprint's cutoff (1/255 / exp(-9/2) = 0.353). Opacity 0.5 drawn out
    # by F = diag(4, 1, 1/4) across the view thins to 1 - 0.5^(1/4) = 0.159 in
    # the render (Beer-Lambert through the deformed Gaussian), so check must
    # not call it a cut; the same puff unstretched is one.
    look = LookSpec(name="edge", image=ImageSpec(width=64, height=64), shading=ShadingSpec(blend="over"))
    cam = Camera(width=64, height=64, view_width=4.0)
    for deform, warned in ((np.diag([4.0, 1.0, 0.25])[None], False), (np.eye(3)[None], True)):
        monkeypatch.setattr(check_module, "simulate", lambda *a, state=_puff_at_the_edge(deform), **k: [state])
        assert bool(check_module.border_report(look, cam, None, [0])) is warned
