"""Draw samples/light-pipe.dxf: the guide and panel window of samples/light-pipe-90.json as a
CAD user would draw the cross-section, with coordinates worked out by hand (not by the program's
shape builders), so importing it checks the import against the builders.

    python samples/make-light-pipe-dxf.py [OUT.dxf]     (needs ezdxf; default: beside this script)

Guide (layer "guide", drawn as LINEs and ARCs): 3 mm wide, 10 mm straight along +x from the
input face at x = 0, a 90 degree left bend about (10, 9.5) with an inner radius of 8 mm and an
outer radius of 11 mm, then 12 mm straight up to the exit face at y = 21.5.
Panel window (layer "panel window", one closed LWPOLYLINE): 10 mm by 1.5 mm, from y = 22 to 23.5,
x = 14.5 to 24.5.  Units: mm ($INSUNITS = 4).
"""
import sys
from pathlib import Path

import ezdxf

doc = ezdxf.new("R2010")
doc.header["$INSUNITS"] = 4
msp = doc.modelspace()
guide = {"layer": "guide"}
msp.add_line((0, -1.5), (0, 1.5), dxfattribs=guide)            # input face
msp.add_line((0, 1.5), (10, 1.5), dxfattribs=guide)            # inner wall, straight
msp.add_arc((10, 9.5), 8, 270, 360, dxfattribs=guide)          # inner wall of the bend
msp.add_line((18, 9.5), (18, 21.5), dxfattribs=guide)          # inner wall, going up
msp.add_line((18, 21.5), (21, 21.5), dxfattribs=guide)         # exit face
msp.add_line((21, 21.5), (21, 9.5), dxfattribs=guide)          # outer wall, going up
msp.add_arc((10, 9.5), 11, 270, 360, dxfattribs=guide)         # outer wall of the bend
msp.add_line((10, -1.5), (0, -1.5), dxfattribs=guide)          # outer wall, straight
msp.add_lwpolyline([(14.5, 22), (24.5, 22), (24.5, 23.5), (14.5, 23.5)], close=True,
                   dxfattribs={"layer": "panel window"})
doc.saveas(sys.argv[1] if len(sys.argv) > 1 else Path(__file__).with_name("light-pipe.dxf"))
