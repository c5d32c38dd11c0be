"""Make an SVG document safe and unique for placing inline in an HTML page.

Figures are made by our own code, but their text (quantity and analysis names)
comes from the files under audit, and several figures share one page. So before
an SVG goes inline we parse it as XML and keep only drawing: no script, no
foreign content, no event handlers, no reference to anything outside the SVG
itself (only ``#id`` links and ``url(#id)`` paints); and every id gets a
per-figure prefix so two figures never clash.
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET

SVG_NS = "http://www.w3.org/2000/svg"
XLINK_NS = "http://www.w3.org/1999/xlink"
_DROP = {"script", "foreignObject", "metadata", "iframe", "object", "embed", "image", "a"}
_URL = re.compile(r"url\(\s*['\"]?([^)'\"]*)['\"]?\s*\)")
_HREFS = ("href", f"{{{XLINK_NS}}}href")

ET.register_namespace("", SVG_NS)
ET.register_namespace("xlink", XLINK_NS)


class UnsafeSvgError(ValueError):
    """The SVG cannot be parsed; it is not placed in the report."""


def _local(tag: str) -> str:
    return tag.rsplit("}", 1)[-1]


def _rewrite_urls(value: str, prefix: str) -> str | None:
    """``value`` with ``url(#id)`` renamed; ``None`` if it points outside the document."""
    for target in _URL.findall(value):
        if not target.startswith("#"):
            return None
    return _URL.sub(lambda m: f"url(#{prefix}-{m.group(1)[1:]})", value)


def inline_svg(svg: str, prefix: str, scale: float = 1.0, label: str = "") -> str:
    """Return ``svg`` as a sanitized ``<svg>`` element string with ids prefixed by ``prefix``.

    The height attribute is dropped and the width becomes ``scale`` times the
    natural width (the page's style sheet lets the figure shrink below it; the
    ``viewBox`` keeps the aspect ratio). ``label`` becomes the figure's ``aria-label``.

    Raises
    ------
    UnsafeSvgError
        When ``svg`` is not well-formed XML with an ``<svg>`` root.
    """
    try:
        root = ET.fromstring(svg.encode("utf-8"))
    except ET.ParseError as exc:
        raise UnsafeSvgError(f"figure {prefix!r}: not well-formed SVG ({exc})") from exc
    if _local(root.tag) != "svg":
        raise UnsafeSvgError(f"figure {prefix!r}: root element is not <svg>")
    for parent in list(root.iter()):
        for child in list(parent):
            if not isinstance(child.tag, str) or _local(child.tag) in _DROP:
                parent.remove(child)
    for el in root.iter():
        for name in list(el.attrib):
            value = el.attrib[name]
            local = _local(name)
            if local.lower().startswith("on"):
                del el.attrib[name]
            elif name == "id":
                el.attrib[name] = f"{prefix}-{value}"
            elif name in _HREFS:
                if value.startswith("#"):
                    el.attrib[name] = f"#{prefix}-{value[1:]}"
                else:
                    del el.attrib[name]
            elif "url(" in value:
                fixed = _rewrite_urls(value, prefix)
                if fixed is None:
                    del el.attrib[name]
                else:
                    el.attrib[name] = fixed
        if _local(el.tag) == "style" and el.text:
            # Only plain declarations; anything that could load or import is dropped.
            if "@import" in el.text or any(not t.startswith("#") for t in _URL.findall(el.text)):
                el.text = ""
    # The page sizes figures through CSS within a bound of ``scale`` times the natural
    # width, given as the width attribute (the viewBox keeps the aspect ratio). A style
    # attribute would be neater, but weasyprint 70 then fails on a second document.
    width = root.attrib.pop("width", "")
    root.attrib.pop("height", None)
    root.attrib.pop("style", None)
    if m := re.fullmatch(r"([0-9.]+)(pt|px)?", width):
        root.set("width", f"{float(m.group(1)) * scale:.1f}{m.group(2) or 'px'}")
    root.set("id", f"{prefix}-svg")
    root.set("role", "img")
    if label:
        root.set("aria-label", label)  # escaped by the serializer
    return ET.tostring(root, encoding="unicode")
