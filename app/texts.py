"""Words the app shows: the cautions and the about text."""

from loopkit import __version__
from loopkit.cautions import CAUTION

__all__ = ["ABOUT_HTML", "CAUTIONS_HTML", "CAUTION_SHORT"]

#: The caution the window shows: loopkit's one caution text.
CAUTION_SHORT = CAUTION

CAUTIONS_HTML = f"""
<h3>Before you build from these numbers</h3>
<ul>
<li><b>A design aid.</b> loopkit computes averaged small-signal models and margins. Real parts have tolerance,
temperature drift and parasitics the models leave out. Measure the loop gain and the load-step response of the
built circuit before you rely on it.</li>
<li><b>Stored energy.</b> Inductors and output capacitors hold energy that can arc, burn or injure when a
converter fails or is shorted; capacitors may stay charged after power is removed.</li>
<li><b>Batteries.</b> Battery-fed converters see very large fault currents: fuse and protect them as the cell
maker specifies.</li>
<li><b>Mains and high voltage.</b> Anything connected to the mains or working at hazardous voltages needs
isolation, creepage and clearance designed and checked by qualified people, to the local codes and standards
and under licensed practice.</li>
</ul>
<p>{CAUTION}</p>
"""

ABOUT_HTML = f"""
<h3>loopkit {__version__}</h3>
<p>Design and check the feedback loop of switching DC-DC converters at every operating corner: the power stage
at each input voltage and load, the compensator synthesised for a crossover and phase-margin target, parts
snapped to IEC 60063 series, margins before and after snapping.</p>
<p>Every number shown here comes from the same library path as the <code>loopkit</code> command line
(<code>loopkit design FILE --json</code> gives the same margins).</p>
{CAUTIONS_HTML}
"""
