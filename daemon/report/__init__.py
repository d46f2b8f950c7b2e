"""``heft report``: a set/job record a QC lead hands over, as HTML (with print styles) or PDF.

:mod:`.model` and :mod:`.values` are pure (records in, a typed report out); :mod:`.gather`
reads a station's store; :mod:`.plots`, :mod:`.html` and :mod:`.pdf` render. The renderers
import matplotlib, Jinja2 and WeasyPrint only when called, so importing this package is cheap.
"""
