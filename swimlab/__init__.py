"""swimlab: swim-tunnel respirometry, from the oxygen trace to published numbers.

The science modules (:mod:`swimlab.water`, :mod:`swimlab.oxygen`, :mod:`swimlab.flume`,
:mod:`swimlab.hydrodynamics`, :mod:`swimlab.trace`, :mod:`swimlab.uptake`,
:mod:`swimlab.performance`) are plain functions on numbers and arrays. One orchestration point,
:func:`swimlab.analysis.analyse`, turns a :class:`swimlab.session.Session` into an
:class:`swimlab.analysis.Analysis`; the app, the command line and the report all call it.
"""

__version__ = "0.1.0"
