"""The report's page: its style, colours, cautions, and the HTML and figure helpers."""

from __future__ import annotations

import base64
import html
import io
import math
from pathlib import Path

import pandas as pd

#: Section colours of this report (our own choice, for print contrast).
SECTION_COLOURS = {"hp": "#1b4f72", "ip": "#7d3c98", "lp_dry": "#117864", "lp": "#7e5109"}
SECTION_TITLES = {
    "hp": "HP section",
    "ip": "IP section",
    "lp_dry": "LP dry stage group (crossover to LP extraction)",
    "lp": "LP section, whole (energy balance)",
}
EFFICIENCY_COLUMNS = {
    "hp": "hp_efficiency",
    "ip": "ip_efficiency",
    "lp_dry": "lp_dry_efficiency",
    "lp": "lp_used_energy_efficiency",
}

CAUTION = (
    "Advisory performance information only. isentrope is not a protective function and is "
    "not part of any turbine control or protection system. Its figures carry measurement "
    "uncertainty, stated beside them. The turbine maker's limits and instructions, local codes "
    "and licensed engineering practice take precedence over anything in this report."
)

CSS = """
body { font-family: Georgia, 'DejaVu Serif', serif; color: #111; max-width: 60rem; margin: 2rem auto;
       padding: 0 1rem; line-height: 1.45; }
h1 { font-size: 1.6rem; margin-bottom: 0.2rem; } h2 { font-size: 1.25rem; border-bottom: 1px solid #999;
     margin-top: 2.2rem; } h3 { font-size: 1.05rem; }
.caution { border: 2px solid #111; padding: 0.6rem 0.9rem; margin: 1rem 0; font-size: 0.95rem; }
table { border-collapse: collapse; margin: 0.6rem 0; font-size: 0.9rem; }
th, td { border: 1px solid #bbb; padding: 0.25rem 0.5rem; text-align: right; }
th { background: #eee; } td.l, th.l { text-align: left; }
figure { margin: 1rem 0; page-break-inside: avoid; } figure img { width: 100%; height: auto; }
figcaption { font-size: 0.85rem; color: #333; }
.meta { color: #444; font-size: 0.9rem; }
@media print { body { margin: 0; max-width: none; } h2 { page-break-after: avoid; } }
"""


def plt():
    """matplotlib.pyplot on the Agg backend (no display), imported on first use."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def fmt(x, spec=".2f", missing="n/a") -> str:
    """``x`` formatted with ``spec``; ``missing`` for None, text or a non-finite number."""
    try:
        v = float(x)
    except (TypeError, ValueError):
        return missing
    return format(v, spec) if math.isfinite(v) else missing


class Figures:
    """Collects figures as PNG files and data URIs."""

    def __init__(self, out_dir: Path):
        self.out_dir = out_dir
        self.items: list[tuple[str, str, str]] = []  # (file name, data uri, caption)

    def add(self, fig, name: str, caption: str) -> str:
        pyplot = plt()
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=110, bbox_inches="tight")
        pyplot.close(fig)
        data = buf.getvalue()
        (self.out_dir / f"{name}.png").write_bytes(data)
        uri = "data:image/png;base64," + base64.b64encode(data).decode("ascii")
        self.items.append((f"{name}.png", uri, caption))
        return (
            f'<figure><img src="{uri}" alt="{html.escape(caption)}" data-file="{name}.png">'
            f"<figcaption>{html.escape(caption)}</figcaption></figure>"
        )


def table(frame: pd.DataFrame, left: tuple = ()) -> str:
    """An HTML table of ``frame`` (every cell escaped); the ``left`` columns left-aligned."""
    head = "".join(
        f'<th class="{"l" if c in left else ""}">{html.escape(str(c))}</th>' for c in frame.columns
    )
    rows = []
    for _, r in frame.iterrows():
        rows.append(
            "".join(
                f'<td class="{"l" if c in left else ""}">{html.escape(str(r[c]))}</td>' for c in frame.columns
            )
        )
    body = "".join(f"<tr>{r}</tr>" for r in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def caution() -> str:
    """The caution box that opens and closes the page."""
    return f'<div class="caution"><strong>Caution.</strong> {html.escape(CAUTION)}</div>'


def document(title: str, parts: list[str]) -> str:
    """The whole page: ``parts`` in order inside one self-contained HTML document."""
    return (
        '<!DOCTYPE html><html lang="en"><head><meta charset="utf-8">'
        f"<title>{html.escape(title)}</title><style>{CSS}</style></head><body>"
        + "\n".join(parts)
        + "</body></html>"
    )
