"""How ray legs are coloured and faded in the drawing, and the scene's purpose field.

Offscreen pytest-qt checks on the pens the canvas actually gives its ray items.  "Heavy" means
luminance contrast against the drawing background, with the luminance weights of the sRGB
primaries (published: ITU-R BT.709, Y = 0.2126 R + 0.7152 G + 0.0722 B).
"""
from __future__ import annotations

import os
from dataclasses import replace
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402

pytest.importorskip("pytestqt")

from gui import spectral  # noqa: E402
from gui.app import build_parser  # noqa: E402
from gui.main_window import MainWindow  # noqa: E402
from gui.raydraw import LEVELS  # noqa: E402

SAMPLES = Path(__file__).resolve().parents[1] / "samples"
CEMENTED = SAMPLES / "cemented-prism-pair.json"
WINDOW = SAMPLES / "oblique-window.json"
LIGHT_PIPE = SAMPLES / "light-pipe-90.json"
TIMEOUT_MS = 30_000


@pytest.fixture
def win(qtbot, tmp_path, monkeypatch):
    monkeypatch.setenv("RAYTRACE_GUI_HOME", str(tmp_path / "home"))
    w = MainWindow(autosave_s=3600.0)
    qtbot.addWidget(w)
    w.show_error = lambda title, text: pytest.fail(text)
    w.ask_unsaved = lambda: "discard"
    yield w
    w.worker.shutdown()


def wait_traced(qtbot, win):
    def done():
        out = win.last_outcome
        return win.worker.is_idle() and out is not None and out.request.scene is win.doc.scene
    qtbot.waitUntil(done, timeout=TIMEOUT_MS)
    return win.last_outcome.result


def contrast(colour) -> float:
    """Luminance difference from the drawing background (published: ITU-R BT.709 weights)."""
    rgb = (colour.red(), colour.green(), colour.blue())
    return spectral.luminance(spectral.BACKGROUND) - spectral.luminance(rgb)


def groups(win, key=None, level=None):
    return [g for g in win.canvas.ray_groups
            if (key is None or g[0] == key) and (level is None or g[1] == level)]


def test_escaping_legs_fade_with_flux_like_other_rays(qtbot, win):
    """The window without its detectors: the transmitted beam (~92 %) and the 4 % glint off the
    entry face both leave the scene; the glint must be drawn much lighter, and each brightness
    level must be exactly as heavy in pink as in orange (common practice: one fade for all)."""
    assert win.open_file(str(WINDOW))
    win.doc.apply(replace(win.doc.scene, detectors=[]), "remove detectors")
    wait_traced(qtbot, win)
    strong, glint = groups(win, "escaping", 0), groups(win, "escaping", 2)
    assert strong and glint, win.canvas.ray_groups
    assert strong[0][2].name() != glint[0][2].name()
    assert contrast(glint[0][2]) < 0.4 * contrast(strong[0][2])
    for lv in range(len(LEVELS)):
        pink, orange = groups(win, "escaping", lv), groups(win, "ray", lv)
        if pink and orange:
            # within the rounding of 8-bit channels
            assert contrast(pink[0][2]) == pytest.approx(contrast(orange[0][2]), abs=1.5), lv
    # the glint never covers the beam: brighter levels are stacked above fainter ones of any kind
    z = {(g[0], g[1]): item.zValue() for g, item in zip(win.canvas.ray_groups, win.canvas._ray_items)}
    assert z[("escaping", 2)] < z[("ray", 0)] < z[("escaping", 0)]
    legend = win.canvas.legend
    assert "fade" in legend.fade_note.text() and legend.fade_note.isVisibleTo(legend)


def test_colour_by_wavelength_on_the_cemented_pair(qtbot, win):
    assert win.open_file(str(CEMENTED))
    wait_traced(qtbot, win)
    assert not win.wavelength_colour_action.isChecked(), "off by default"
    kinds = {g[0] for g in win.canvas.ray_groups}
    assert kinds <= {"ray", "escaping", "tir"}
    win.wavelength_colour_action.trigger()
    assert win.canvas.colour_by_wavelength
    # 486.13, 587.56 and 656.27 nm fall in the 485, 590 and 655 nm bins of 5 nm
    keys = {g[0] for g in win.canvas.ray_groups}
    assert keys == {485.0, 590.0, 655.0}
    blue, red = groups(win, 485.0, 0)[0][2], groups(win, 655.0, 0)[0][2]
    assert blue.name() != red.name()
    assert blue.blue() > blue.red() and red.red() > red.blue() + 60 and red.red() > red.green() + 60
    # still fading with flux: the glints (level 2) are lighter than the beam (level 0)
    assert contrast(groups(win, 655.0, 2)[0][2]) < 0.4 * contrast(red)
    legend = win.canvas.legend
    assert legend.spectrum_text.isVisibleTo(legend) and "wavelength" in legend.spectrum_text.text()
    assert not any(w.isVisibleTo(legend) for w in legend._kind_widgets)
    win.wavelength_colour_action.trigger()
    assert {g[0] for g in win.canvas.ray_groups} == kinds
    assert not legend.spectrum_text.isVisibleTo(legend)


def test_colour_by_wavelength_is_for_the_session_only(qtbot, win, tmp_path):
    win.wavelength_colour_action.trigger()
    other = MainWindow(autosave_s=3600.0)
    qtbot.addWidget(other)
    try:
        assert not other.wavelength_colour_action.isChecked() and not other.canvas.colour_by_wavelength
    finally:
        other.worker.shutdown()


def test_spectral_colours():
    """Hue order of the visible spectrum (common practice: violet < 450 nm, blue ~470, green
    ~530, yellow ~580, red > 620 nm) and grey outside 380-780 nm."""
    r, g, b = spectral.spectral_rgb(450.0)
    assert b > 2 * max(r, g)
    r, g, b = spectral.spectral_rgb(530.0)
    assert g > 2 * max(r, b)
    r, g, b = spectral.spectral_rgb(585.0)
    assert r > 2 * b and g > 2 * b
    r, g, b = spectral.spectral_rgb(656.0)
    assert r > 3 * max(g, b, 1)
    assert spectral.spectral_rgb(379.0) == spectral.OUTSIDE_GREY
    assert spectral.spectral_rgb(781.0) == spectral.OUTSIDE_GREY
    assert spectral.spectral_rgb(float("nan")) == spectral.OUTSIDE_GREY
    # none lighter than the orange ray colour, so no colour vanishes on the light drawing
    for nm in range(380, 781, 5):
        assert spectral.luminance(spectral.spectral_rgb(nm)) <= spectral.MAX_LUMINANCE + 1.0


def test_screenshot_option_for_wavelength_colours():
    assert build_parser().parse_args(["x.json", "--colour-by-wavelength", "--screenshot", "a.png"]).colour_by_wavelength
    assert not build_parser().parse_args(["x.json"]).colour_by_wavelength


def test_purpose_field_holds_and_shows_the_whole_story(qtbot, win):
    assert win.open_file(str(LIGHT_PIPE))
    win.resize(1400, 900)
    win.show()
    qtbot.waitExposed(win)
    story = win.doc.scene.story
    assert len(story) > 150
    field = win.properties.pages[None].story
    assert field.text() == story and field.toolTip() == story
    qtbot.waitUntil(lambda: field.document().size().height() > 1, timeout=TIMEOUT_MS)
    assert field.verticalScrollBar().maximum() == 0, "the whole story is visible without scrolling"
    lines = field.document().documentLayout().documentSize().height()   # plain-text layouts count lines
    assert lines >= 3, "word-wrapped over several lines"
    field.setFocus()
    field.setPlainText("Where does the\nlight go?")
    field.editingFinished.emit()
    assert win.doc.scene.story == "Where does the light go?"
    win.doc.undo_stack.undo()
    assert win.doc.scene.story == story and field.text() == story
