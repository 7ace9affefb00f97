"""The chart palette: published colours, colour-blind safety, fixed per platform."""

from __future__ import annotations

import itertools

import colorspacious as cs
import numpy as np
import pytest

from pipeline.report.palette import (COHORT_GREYS, OKABE_ITO, PLATFORM_COLOURS, Palette,
                                     build_palette)


def _rgb(hex_: str) -> tuple[int, int, int]:
    return tuple(int(hex_[i:i + 2], 16) for i in (1, 3, 5))


def test_colours_are_the_okabe_ito_set():
    # Okabe & Ito (2008), "Color Universal Design", RGB values of the eight colours
    # from memory
    published = {"black": (0, 0, 0), "orange": (230, 159, 0), "sky blue": (86, 180, 233),
                 "bluish green": (0, 158, 115), "yellow": (240, 228, 66),
                 "blue": (0, 114, 178), "vermillion": (213, 94, 0),
                 "reddish purple": (204, 121, 167)}
    assert {name: _rgb(h) for name, h in OKABE_ITO} == published
    assert len(set(PLATFORM_COLOURS)) == 8


@pytest.mark.parametrize("cvd", ["protanomaly", "deuteranomaly", "tritanomaly"])
def test_platform_colours_stay_apart_under_colour_vision_deficiency(cvd):
    # Simulated full dichromacy (severity 100) with colorspacious, which implements
    # Machado, Oliveira & Fernandes (2009), IEEE TVCG 15:1291-1298; distance is
    # CAM02-UCS delta E (Luo, Cui & Li 2006). 10 units apart: clearly different
    # categories, not just a just-noticeable difference (common practice).
    rgb = np.array([_rgb(h) for h in PLATFORM_COLOURS]) / 255
    space = {"name": "sRGB1+CVD", "cvd_type": cvd, "severity": 100}
    sim = np.clip(cs.cspace_convert(rgb, space, "sRGB1"), 0, 1)
    gaps = [cs.deltaE(sim[i], sim[j], input_space="sRGB1")
            for i, j in itertools.combinations(range(len(rgb)), 2)]
    assert min(gaps) > 10


def test_cohort_greys_differ_in_lightness():
    # Greys differ in lightness only, which no colour-vision deficiency removes; the first
    # three (the usual number of cohorts) are 20 CAM02-UCS units apart. common practice
    rgb = np.array([_rgb(h) for h in COHORT_GREYS[:3]]) / 255
    gaps = [cs.deltaE(rgb[i], rgb[j], input_space="sRGB1")
            for i, j in itertools.combinations(range(3), 2)]
    assert min(gaps) > 18


def test_vocabulary_order_fixes_colours_whatever_the_data():
    vocab = ["tv", "phone", "radio"]
    a = build_palette(vocab, seen=["radio"])
    b = build_palette(vocab, seen=["phone", "tv", "radio"])
    assert [a.colour(c) for c in vocab] == [b.colour(c) for c in vocab] \
        == list(PLATFORM_COLOURS[:3])


def test_without_vocabulary_codes_are_sorted_and_extras_follow_the_vocabulary():
    assert build_palette([], seen=["tv", "book", "phone"]).platforms == ("book", "phone", "tv")
    p = build_palette(["tv"], seen=["zine", "app", "tv"])
    assert p.platforms == ("tv", "app", "zine")
    assert p.colour("app") == PLATFORM_COLOURS[1]


def test_colours_cycle_after_eight_and_unknown_codes_are_refused():
    codes = [f"p{i}" for i in range(10)]
    p = Palette(tuple(codes))
    assert p.colour("p8") == p.colour("p0")
    with pytest.raises(KeyError, match="not in the run's vocabulary"):
        p.colour("nope")


def test_scales_pair_labels_with_colours():
    p = build_palette(["tv", "phone"], labels={"tv": "Television"}, cohorts=["a", "b"])
    assert p.platform_scale() == {"domain": ["Television", "phone"],
                                  "range": list(PLATFORM_COLOURS[:2])}
    assert p.cohort_scale()["domain"] == ["a", "b"]
