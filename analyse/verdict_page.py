"""The short HTML page of ``limbtrace verify`` (self-contained, escaped, offline)."""

from __future__ import annotations

from pathlib import Path

import jinja2

__all__ = ["write_verdict_html"]

_TEMPLATE = """<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<title>Sighting check: {{ verdict.verdict }}</title>
<style>
body { font-family: Georgia, 'DejaVu Serif', serif; max-width: 52rem; margin: 2rem auto;
       padding: 0 1rem; color: #1d1d1b; line-height: 1.45; }
h1 { font-size: 1.5rem; margin-bottom: .2rem; }
.verdict { font-size: 1.3rem; padding: .6rem 1rem; border-left: .5rem solid #888; background: #f4f2ee; }
.consistent { border-color: #2f7d32; } .inconsistent { border-color: #b3261e; }
.inconclusive { border-color: #b98900; }
table { border-collapse: collapse; width: 100%; margin-top: 1rem; }
td, th { border-bottom: 1px solid #ddd; padding: .4rem .5rem; vertical-align: top; text-align: left; }
.pass { color: #2f7d32; } .fail { color: #b3261e; } .open { color: #8a6500; }
.caution { margin-top: 1.5rem; padding: .6rem 1rem; background: #fff4e5; border: 1px solid #e0b070; }
small { color: #555; }
</style></head><body>
<h1>Sighting check for {{ where }}</h1>
<p><small>{{ frames }} frame(s) from {{ folder }}; {{ when }}</small></p>
<p class="verdict {{ verdict.verdict }}"><strong>{{ verdict.verdict | capitalize }}.</strong>
{{ verdict.summary }}</p>
<table><tr><th>check</th><th>result</th><th>what it means</th><th>evidence</th></tr>
{% for c in verdict.checks %}<tr>
<td>{{ c.name }}</td>
<td class="{{ 'pass' if c.passed else ('open' if c.passed is none or not c.confident else 'fail') }}">
{{ 'passed' if c.passed else ('undecided' if c.passed is none else ('failed' if c.confident else 'doubtful')) }}</td>
<td>{{ c.reason }}</td><td><small>{{ c.detail }}</small></td></tr>{% endfor %}
</table>
<p class="caution"><strong>Eye safety.</strong> Never look at the Sun through a viewfinder,
binoculars or a telescope without a proper solar filter; use the camera's live view, look
only in the last moments before sunset, and follow local rules.</p>
<p><small>Physically possible ranges come from ray tracing a single near-surface layer with
lapse rates from {{ gamma[0] }} to {{ gamma[1] }} K/km over the 1976 US Standard Atmosphere;
mirages from thin layers can exceed them.</small></p>
</body></html>
"""


def write_verdict_html(path: Path, verdict, *, where: str, folder: str, frames: int,
                       when: str, gamma: tuple[float, float]) -> None:
    """Render the verdict page; every string is escaped."""
    env = jinja2.Environment(autoescape=True, undefined=jinja2.StrictUndefined)
    html = env.from_string(_TEMPLATE).render(verdict=verdict, where=where, folder=folder,
                                             frames=frames, when=when, gamma=gamma)
    Path(path).write_text(html, encoding="utf-8")
