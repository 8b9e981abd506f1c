"""Texts of the Help menu."""
from __future__ import annotations

SAFETY = """<h3>Safety cautions</h3>
<ul>
<li><b>High-power LED and laser sources.</b> A traced flux is a model, not a measurement.
When you build and test the real setup, follow the laser safety and photobiological safety
rules that apply to your source (classification, eye and skin exposure limits, protective
eyewear, beam enclosures and warning labels).</li>
<li><b>Retroreflectors for road or vehicle use</b> must be certified to the standard that applies
where they are used; a simulation here does not certify a reflector.</li>
<li><b>Results do not replace</b> local codes, the applicable standards or licensed professional
practice. Check every design that matters to safety by measurement and by a qualified person.</li>
</ul>
<p>A 2D trace treats every part as infinitely long perpendicular to the drawing; out-of-plane
rays, scattering, coatings other than the ones modelled and manufacturing tolerances are not
included.</p>
"""

SHORTCUTS = """<h3>Keys</h3>
<table>
<tr><td>Ctrl+N / Ctrl+O / Ctrl+S / Ctrl+Shift+S</td><td>new, open, save, save as</td></tr>
<tr><td>Ctrl+Z / Ctrl+Shift+Z or Ctrl+Y</td><td>undo / redo</td></tr>
<tr><td>Del, Ctrl+D</td><td>delete, duplicate the selected part, source or detector</td></tr>
<tr><td>Ctrl+Shift+A</td><td>add a part from a shape (prism, window, light pipe...)</td></tr>
<tr><td>arrow keys (Shift: x10)</td><td>move the selection by one grid step</td></tr>
<tr><td>V, R</td><td>select and drag / rotate</td></tr>
<tr><td>P, B</td><td>draw a part by its vertices / by a rectangle</td></tr>
<tr><td>L, D</td><td>place a light source / a detector</td></tr>
<tr><td>A, H</td><td>bend an edge into an arc (drag it, or click it and type a radius) / cut a hole</td></tr>
<tr><td>M, Z</td><td>measure a distance and an angle / zoom to a dragged box</td></tr>
<tr><td>digits while drawing</td><td>type the next point: x, y or @dx, dy or length&lt;angle</td></tr>
<tr><td>Enter, Backspace, Esc</td><td>close, take back a vertex, cancel (while drawing)</td></tr>
<tr><td>F5 / Shift+F5</td><td>trace now / stop the trace</td></tr>
<tr><td>F6</td><td>sweep a number of the scene</td></tr>
<tr><td>Ctrl+0</td><td>fit the parts and sources in the view (detectors near them cross it)</td></tr>
<tr><td>Ctrl+Shift+0</td><td>fit everything, every detector whole</td></tr>
<tr><td>Ctrl+= (Ctrl++), Ctrl+-</td><td>zoom in, zoom out</td></tr>
<tr><td>G, Shift+G</td><td>grid on/off, snapping to the grid on/off</td></tr>
<tr><td>Shift+V</td><td>snapping to vertices, midpoints, arc centres and edges on/off</td></tr>
<tr><td>Ctrl+Q</td><td>quit (asks first about unsaved changes)</td></tr>
<tr><td>F1</td><td>this list of keys</td></tr>
<tr><td>mouse wheel, drag on empty space</td><td>zoom, pan</td></tr>
</table>
"""

ABOUT = """<h3>2D ray tracer</h3>
<p>Draw parts, sources and detectors; every edit is traced again at once. Rays split at every
face into reflected and refracted children with Fresnel s/p shares, are totally internally
reflected beyond the critical angle, and lose flux to bulk absorption. The flux ledger says where
every unit of source flux ended: on a detector, escaping through a face, absorbed or truncated.</p>
"""
