"""Named colours (Okabe-Ito, colour-blind safe), icons and the light/dark look of the window."""

from __future__ import annotations

import json
from functools import lru_cache
from pathlib import Path

RESOURCES = Path(__file__).resolve().parents[2] / "resources"


@lru_cache(maxsize=1)
def palette() -> dict:
    """The palette file ``resources/styles/palette.json`` (falls back to built-in Okabe-Ito values)."""
    try:
        return json.loads((RESOURCES / "styles" / "palette.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {"colours": {"black": "#000000", "orange": "#E69F00", "sky_blue": "#56B4E9",
                            "bluish_green": "#009E73", "yellow": "#F0E442", "blue": "#0072B2",
                            "vermillion": "#D55E00", "reddish_purple": "#CC79A7", "grey": "#8C8C8C"},
                "stage_order": ["bluish_green", "sky_blue", "orange", "vermillion", "reddish_purple",
                                "blue", "yellow", "grey"],
                "roles": {"risk_high": "vermillion", "risk_medium": "orange", "risk_low": "sky_blue",
                          "ok": "bluish_green", "accent": "blue", "whatif": "reddish_purple",
                          "banner_light": "#FFF4D6", "banner_dark": "#4A3B12"}}


def colour(name: str) -> str:
    """Hex colour for a palette name or role (``"vermillion"``, ``"risk_high"``, ...)."""
    data = palette()
    value = data["roles"].get(name, name)
    return data["colours"].get(value, value)


def stage_colours(n_stages: int) -> list:
    """One distinct colour per stage, in stage order (stages beyond the palette repeat grey)."""
    order = palette()["stage_order"]
    return [colour(order[i]) if i < len(order) else colour("grey") for i in range(n_stages)]


def risk_colour(probability: float) -> str:
    """Colour cue for a follow-up probability: low / medium / high (paired with text, never alone)."""
    if probability >= 0.5:
        return colour("risk_high")
    if probability >= 0.2:
        return colour("risk_medium")
    return colour("risk_low")


def icon(name: str):
    """QIcon from ``resources/icons/<name>.svg`` (an empty icon if the file is missing)."""
    from PySide6.QtGui import QIcon

    path = RESOURCES / "icons" / f"{name}.svg"
    return QIcon(str(path)) if path.exists() else QIcon()


def is_dark(app=None) -> bool:
    """True when the system palette is dark (window colour darker than its text)."""
    from PySide6.QtGui import QGuiApplication, QPalette

    app = app or QGuiApplication.instance()
    if app is None:
        return False
    pal = app.palette()
    return pal.color(QPalette.Window).lightness() < pal.color(QPalette.WindowText).lightness()


def banner_style(dark: bool) -> str:
    """Style sheet for the advisory banner (warm, calm; readable in light and dark palettes)."""
    background = colour("banner_dark") if dark else colour("banner_light")
    text = "#FFF8E6" if dark else "#3D2E00"
    return (f"QLabel#advisoryBanner {{ background: {background}; color: {text}; padding: 6px 10px; "
            f"border-left: 5px solid {colour('orange')}; font-weight: 600; }}")
