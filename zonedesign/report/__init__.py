"""The self-contained HTML report of a run (entry point: `report.html.write_report`).

html.py assembles the page; plan.py decides what is shown within the size budget;
sections.py writes each section; svgmap.py draws zones as SVG; colouring.py gives
neighbouring zones different fills; charts.py makes the distribution charts, drawn as
plain SVG with svgdraw.py (axes, ticks, text); format.py
and style.py hold text helpers and the page's look.
"""
