"""Layout of the report's group-fairness section: the fifteen-column table stays inside the text
column (screen and print, A4 and Letter), and the four-fifths line of the selection-rate chart is
named where no bar can cover its label."""
import os
import re

import pytest

from conftest import CHROMIUM

#: Text column of a printed page in CSS px: A4 and Letter less the report's 14 mm side margins.
PRINT_WIDTHS = {"A4": round((210 - 28) / 25.4 * 96), "Letter": round((8.5 * 25.4 - 28) / 25.4 * 96)}


@pytest.fixture(scope="module")
def pair_result(demo_df):
    import audit

    return audit.run(demo_df, label="delinquent", score="p_delinquent", protected=["sex", "tenure_years"],
                     favorable="0")


@pytest.fixture(scope="module")
def pair_report(pair_result, tmp_path_factory):
    from audit.faces.report import build_html

    path = tmp_path_factory.mktemp("layout6") / "report.html"
    path.write_text(build_html(pair_result, command=None), encoding="utf-8")
    return path


def test_pair_groups_break_only_after_the_ampersand(pair_report):
    raw = pair_report.read_text(encoding="utf-8")
    fair = raw[raw.index("<section id='fairness'>"):raw.index("<section id='limits'>")]
    assert "<table class='wide fair'>" in fair
    # the word before each '&' is kept with it; an interval stays whole, a line may break before it
    assert "<td><span class='tok'>sex &amp;</span> tenure_years</td>" in fair
    assert ("<span class='tok'>sex=female &amp;</span> tenure_years=<wbr><span class='tok'>[2, 3.4)</span>"
            in fair)


def test_four_fifths_line_is_named_in_the_legend_above_the_plot(pair_result):
    from audit.faces import charts

    g = pair_result.fairness.groups
    for attr in ("sex", "sex & tenure_years"):
        fig = charts.selection_rates(g, attr)
        ref = float(g[(g["attribute"] == attr) & g["is_reference"]]["selection_rate"].iloc[0])
        assert not any("four-fifths" in (a.text or "") for a in fig.layout.annotations)  # nothing on the plot
        named = [t for t in fig.data if t.name and t.name.startswith("four-fifths of reference")]
        assert len(named) == 1 and named[0].showlegend and f"({0.8 * ref:.1%})" in named[0].name
        assert named[0].line.dash == "dash"  # the legend's sample looks like the line
        assert fig.layout.legend.yanchor == "bottom" and fig.layout.legend.y >= 1.0  # above the plot area
        assert fig.layout.margin.t >= 70  # room for the title and the legend
        assert all(len(x.split("<br>")) == x.count("&amp;") + 1 for x in fig.data[0].x)  # one line per part


@pytest.mark.browser
@pytest.mark.skipif(not os.path.exists(CHROMIUM), reason="Debian's chromium is not installed (.ci/run installs it)")
def test_fairness_table_fits_its_section_on_screen_and_in_print(page, pair_report):
    cases = [("screen", 1200), ("screen", 900)] + [("print", w) for w in PRINT_WIDTHS.values()]
    for media, width in cases:
        page.set_viewport_size({"width": width, "height": 1000})
        page.emulate_media(media=media)
        page.goto(pair_report.as_uri(), wait_until="load")
        got = page.evaluate("""() => {
            const s = document.querySelector('section#fairness'), sr = s.getBoundingClientRect();
            const tables = [...s.querySelectorAll('table')].map(t => t.getBoundingClientRect().right);
            const split = [...s.querySelectorAll('table .tok')].filter(x => x.getClientRects().length > 1);
            return {section: sr.right, tables, split: split.map(x => x.textContent)}; }""")
        assert got["tables"], (media, width)
        assert all(r <= got["section"] + 0.5 for r in got["tables"]), (media, width, got)
        assert not got["split"], (media, width, got["split"])  # no interval broken across lines


@pytest.mark.browser
@pytest.mark.skipif(not os.path.exists(CHROMIUM), reason="Debian's chromium is not installed (.ci/run installs it)")
def test_no_bar_covers_the_four_fifths_label(page, pair_report):
    page.set_viewport_size({"width": 1200, "height": 1000})
    page.emulate_media(media="screen")
    page.goto(pair_report.as_uri(), wait_until="load")
    page.wait_for_selector("[id^='fig-fair-sel-'] .legend")
    got = page.evaluate("""() => [...document.querySelectorAll("[id^='fig-fair-sel-']")].map(fig => {
        const lg = fig.querySelector('.legend').getBoundingClientRect();
        const text = fig.querySelector('.legend').textContent;
        const bars = [...fig.querySelectorAll('.bars path')].map(b => b.getBoundingClientRect());
        const hit = bars.filter(b => b.width > 0 && !(b.right <= lg.left || b.left >= lg.right
                                                     || b.bottom <= lg.top || b.top >= lg.bottom));
        return {text, bars: bars.length, hit: hit.length}; })""")
    assert got
    for fig in got:
        assert re.search(r"four-fifths of reference \(\d+\.\d%\)", fig["text"]), fig
        assert fig["bars"] and fig["hit"] == 0, fig
