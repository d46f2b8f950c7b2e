"""The report page: one Jinja2 template (autoescaped) with its screen and print styles.

One page serves both outputs: a browser shows it on screen and prints it with the ``@media
print`` and ``@page`` rules; WeasyPrint lays the same page out for the PDF (A4 landscape, the
table's header repeated on every page, page numbers in the footer).
"""

from __future__ import annotations

from typing import Final

CSS: Final = """
@page {
  size: A4 landscape;
  margin: 12mm 12mm 15mm 12mm;
  @bottom-left { content: string(doctitle); font: 7.5pt "DejaVu Sans", sans-serif; color: #555; }
  @bottom-right {
    content: "Page " counter(page) " of " counter(pages);
    font: 7.5pt "DejaVu Sans", sans-serif; color: #555;
  }
}
* { box-sizing: border-box; }
html { font-family: "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; font-size: 8.5pt;
       color: #1a1a1a; }
body { margin: 0 auto; max-width: 285mm; padding: 8mm; background: #fff; }
h1 { font-size: 15pt; margin: 0 0 2mm 0; string-set: doctitle content(); }
h2 { font-size: 10.5pt; margin: 5mm 0 2mm 0; padding-bottom: 0.8mm;
     border-bottom: 0.6pt solid #888; break-after: avoid; }
.top { display: flex; gap: 6mm; align-items: flex-start; }
.top dl { flex: 1; display: grid; grid-template-columns: max-content 1fr; gap: 0.8mm 4mm;
          margin: 0; }
.top dt { font-weight: bold; color: #444; }
.top dd { margin: 0; }
.summary { border: 0.8pt solid #888; padding: 2mm 3mm; min-width: 62mm; }
.summary table { border-collapse: collapse; width: 100%; }
.summary td { padding: 0.4mm 1mm; }
.summary td.n { text-align: right; font-weight: bold; font-variant-numeric: tabular-nums; }
table.clubs, table.cal { border-collapse: collapse; width: 100%; }
table.clubs th, table.cal th { text-align: left; vertical-align: bottom; font-size: 7.5pt;
  border-bottom: 0.8pt solid #333; padding: 1mm 1.2mm; background: #f1f1f1; }
table.clubs td, table.cal td { padding: 0.8mm 1.2mm; vertical-align: top;
  border-bottom: 0.4pt solid #ccc; }
table.clubs td.num, table.clubs th.num { text-align: right; font-variant-numeric: tabular-nums;
  white-space: nowrap; }
table.clubs tbody { break-inside: avoid; }
.spec { display: block; color: #555; font-size: 7pt; }
tr.history td { color: #666; font-size: 7.5pt; border-bottom: 0.4pt dotted #ccc; }
tr.history td.first { padding-left: 3mm; }
.verdict { font-weight: bold; white-space: nowrap; }
.v-pass { color: #1b7a3a; }
.v-near_limit { color: #b86e00; }
.v-fail { color: #c0262d; }
.v-no_spec { color: #4d4d4d; }
.note { display: block; font-size: 7pt; color: #333; font-weight: normal; }
figure { margin: 3mm 0 2mm 0; break-inside: avoid; }
figure svg { width: 100%; height: auto; display: block; }
figcaption { font-size: 7.5pt; color: #333; margin-top: 1mm; }
.statement { border-left: 2pt solid #7ea6d3; padding: 1mm 3mm; background: #f6f9fd;
             font-size: 7.5pt; margin: 0; break-inside: avoid; }
.muted { color: #666; }
.nowrap { white-space: nowrap; }
.plots { break-before: page; }
@media screen { .plots { margin-top: 8mm; } }
@media print {
  body { padding: 0; max-width: none; }
}
"""

TEMPLATE: Final = """<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="generator" content="heft {{ report.generator }}">
<title>{{ report.title }}</title>
<style>{{ css }}</style>
</head>
<body>
<h1>{{ report.title }}</h1>
<div class="top">
  <dl>
  {% for label, text in report.header %}
    <dt>{{ label }}</dt><dd>{{ text }}</dd>
  {% endfor %}
  </dl>
  <div class="summary">
    <table>
      <tr><td>Clubs</td><td class="n">{{ s.clubs }}</td></tr>
      <tr><td><span class="v-pass">Pass</span></td><td class="n">{{ s.passes }}</td></tr>
      <tr><td><span class="v-near_limit">Near limit</span> (in spec)</td>
          <td class="n">{{ s.near_limit }}</td></tr>
      <tr><td><span class="v-fail">Fail</span></td><td class="n">{{ s.fails }}</td></tr>
      {% if s.no_spec %}<tr><td>No spec</td><td class="n">{{ s.no_spec }}</td></tr>{% endif %}
      <tr><td class="muted">Measurements</td><td class="n muted">{{ s.measurements }}</td></tr>
      {% if s.remeasured %}<tr><td class="muted">Clubs measured again</td>
          <td class="n muted">{{ s.remeasured }}</td></tr>{% endif %}
    </table>
  </div>
</div>

<h2>Clubs, in capture order</h2>
<table class="clubs">
  <thead><tr>
    <th class="num">No.</th><th>Record</th><th>Time ({{ report.zone }})</th>
    <th>Club id</th><th>Club</th>
    <th class="num">Total weight<br>(g) ± U</th>
    <th class="num">Balance point<br>(in from butt) ± U</th>
    <th class="num">Swing weight<br>(Lorythmic, points) ± U</th>
    <th>Verdict</th>
  </tr></thead>
  {% for row in report.rows %}
  <tbody>
    {{ club_row(row, False) }}
    {% for old in row.history %}{{ club_row(old, True) }}{% endfor %}
  </tbody>
  {% endfor %}
</table>
<p class="muted">Targets are printed under each value as target ± tolerance (from the spec
checks' limits). A club measured again shows its latest measurement first, the earlier ones
beneath it, marked “earlier”. Record is the station's
measurement number: the store keeps every measurement, append-only, under it.</p>


<h2>What the ± values mean</h2>
<p class="statement">{{ report.uncertainty_statement }}</p>

<h2>Calibration chain</h2>
{% if report.calibrations %}
<table class="cal">
  <thead><tr>
    <th>Calibration id</th><th>Kind</th><th>Channel</th><th>Reference mass (g, class, id)</th>
    <th>Calibrated ({{ report.zone }})</th><th>Due (date)</th><th>Device</th><th>By</th>
    <th>Used by (measurements)</th><th>Note</th>
  </tr></thead>
  <tbody>
  {% for c in report.calibrations %}
    <tr>
      <td class="nowrap">{{ c.id }}</td><td>{{ c.kind or "—" }}</td>
      <td class="nowrap">{{ c.channel or "—" }}</td>
      <td>{{ c.reference_text or "—" }}</td><td class="nowrap">{{ c.when_text or "—" }}</td>
      <td class="nowrap">{{ c.due_text or "—" }}</td><td>{{ c.device_text or "—" }}</td>
      <td>{{ c.operator or "—" }}</td><td>{{ c.used_by }}</td>
      <td>{{ cal_note(c) }}</td>
    </tr>
  {% endfor %}
  </tbody>
</table>
{% else %}
<p>The measurements name no calibration record (a gram scale calibrated in its own
firmware, for example).</p>
{% endif %}


<section class="plots">
<h2>Plots</h2>
<figure>{{ figures[0] }}
  <figcaption>Figure 1. Swing weight of each club (marker: the verdict of its swing-weight
  check) with its expanded uncertainty (error bar, k = 2) against the club's target band
  (shaded). Numbers on the x axis are the table's No.</figcaption></figure>
<figure>{{ figures[1] }}
  <figcaption>Figure 2. Total weight of each club through the set, in capture order (marker:
  the verdict of its weight check), with its expanded uncertainty (k = 2) and the club's weight
  band where the spec sets one.</figcaption>
</figure>
</section>


</body>
</html>
"""

# One table row; ``history`` rows are the earlier measurements of a club measured again.
ROW_MACRO: Final = """
{% macro club_row(row, history) %}
<tr class="{{ 'history' if history else 'latest' }}">
  <td class="num first">{{ 'earlier' if history else row.number }}</td>
  <td>{{ record_text(row) }}</td>
  <td>{{ row.time_text }}</td>
  <td>{{ row.club_id or "—" }}</td>
  <td>{{ row.club or "—" }}</td>
  <td class="num">{{ pm(row.weight_g.text, row.weight_g.u_text) }}
    {% if row.weight_band and not history %}<span class="spec">target {{ row.weight_band.text }}
    </span>{% endif %}</td>
  <td class="num">{{ pm(row.balance_point_in.text, row.balance_point_in.u_text) }}
    {% if row.balance_band and not history %}<span class="spec">target {{ row.balance_band.text
    }}</span>{% endif %}</td>
  <td class="num">{{ pm(row.swingweight_label, row.swingweight_u_text) }}
    {% if row.swingweight_band and not history %}<span class="spec">target {{
    row.swingweight_band.text }}</span>{% endif %}</td>
  <td><span class="verdict v-{{ row.verdict.value }}">{{ row.verdict_text }}</span>
    {% if not history %}{% for note in row.notes %}<span class="note">{{ note }}</span>
    {% endfor %}{% endif %}</td>
</tr>
{% endmacro %}
{% macro pm(value, u) %}{{ value }}{% if u %} ± {{ u }}{% endif %}{% endmacro %}
"""
