"""The planner's figure front end (``circlesim/app/static/figure_front.js``) against plotly.js
itself, in Chromium.

The front end keeps its own copy of the figure as the kernel knows it, and applies each of the
kernel's edits both to that copy (with its own small rules) and to every drawn figure (with
plotly.js). A figure drawn afresh from the copy after a series of edits must therefore equal the
figure that received the edits one by one through plotly.js: the reference here is plotly.js's
own ``restyle``, ``relayout``, ``update``, ``addTraces``, ``moveTraces`` and ``deleteTraces``.
The kernel is stood in for by a small model object that records what the front end sends.
"""

from __future__ import annotations

import functools
import http.server
import threading

import pytest
from test_browser import chromium

from circlesim.app.plotly_bundle import (
    BUNDLE_ADDRESS_ENV,
    bundle_address,
    bundle_directory,
    figure_widget_class,
)

pytestmark = pytest.mark.browser

_FIGURE = {
    "data": [{"type": "scatter", "uid": "a", "name": "a", "x": [0, 1, 2], "y": [1, 2, 3]}],
    "layout": {"title": {"text": "before"}, "xaxis": {"range": [0, 2]},
               "shapes": [{"type": "line", "x0": 0, "x1": 2, "y0": 1, "y1": 1}]},
}

# The kernel's messages, in the form plotly's Python FigureWidget sends them (basewidget.py).
_EDITS = [
    ["_py2js_restyle", {"restyle_data": {"y": [[5, 6, 7]], "line.color": ["red"]},
                        "restyle_traces": [0], "trace_edit_id": 1, "layout_edit_id": 1}],
    ["_py2js_relayout", {"relayout_data": {"xaxis.range": [0, 5], "title.text": "after",
                                           "shapes[0].y0": 2, "yaxis.title.text": "y"},
                         "layout_edit_id": 2}],
    ["_py2js_addTraces", {"trace_data": [{"type": "scatter", "uid": "b", "name": "b",
                                          "x": [0, 1], "y": [3, 4]},
                                         {"type": "heatmap", "uid": "c", "name": "c",
                                          "z": [[1, 2], [3, 4]]}],
                          "trace_edit_id": 2, "layout_edit_id": 3}],
    ["_py2js_moveTraces", {"current_trace_inds": [2], "new_trace_inds": [0]}],
    ["_py2js_update", {"style_data": {"name": ["renamed"], "marker.size": [9]},
                       "layout_data": {"legend.font.size": 10}, "style_traces": [1],
                       "trace_edit_id": 3, "layout_edit_id": 4}],
    ["_py2js_deleteTraces", {"delete_inds": [0], "trace_edit_id": 4, "layout_edit_id": 5}],
    ["_py2js_removeLayoutProps", {"remove_props": [["yaxis", "title", "text"]]}],
    ["_py2js_removeTraceProps", {"remove_trace": 0, "remove_props": [["line", "color"]]}],
]

_RUN = """async ([source, figure, edits]) => {
    const url = URL.createObjectURL(new Blob([source], {type: "text/javascript"}));
    const front = (await import(url)).default();
    const pause = (ms) => new Promise((done) => setTimeout(done, ms));
    const state = {_widget_data: figure.data, _widget_layout: figure.layout, _config: {}};
    const handlers = {};
    const sent = [];
    const model = {
        get: (name) => state[name],
        on: (event, handler) => (handlers[event] ??= []).push(handler),
        set: (name, value) => sent.push([name, JSON.parse(JSON.stringify(value))]),
        save_changes: () => {},
    };
    const place = () => {
        const el = document.createElement("div");
        el.style.width = "600px"; el.style.height = "400px";
        document.body.appendChild(el);
        return el;
    };
    front.initialize({model});
    const first = place();
    front.render({model, el: first});
    for (let i = 0; i < 100 && !(first.data && first._fullLayout); i++) await pause(50);
    // numbers from numpy arrive as buffers
    edits.push(["_py2js_restyle", {restyle_data: {x: [{buffer: new DataView(
        new Float64Array([0, 0.5, 1]).buffer), dtype: "float64", shape: [3]}]},
        restyle_traces: [1], trace_edit_id: 5, layout_edit_id: 6}]);
    for (const [name, message] of edits) {
        state[name] = message;
        handlers[`change:${name}`].forEach((handler) => handler());
        state[name] = null;
        handlers[`change:${name}`].forEach((handler) => handler());
    }
    await pause(500);
    const second = place();
    front.render({model, el: second});
    for (let i = 0; i < 100 && !(second.data && second._fullLayout); i++) await pause(50);
    // an emptied container and a missing one mean the same to plotly
    const given = (value) => (value && Object.keys(value).length ? value : null);
    const pick = (gd) => ({
        data: gd.data.map((t) => ({uid: t.uid, type: t.type, name: t.name,
                                   x: t.x && Array.from(t.x), y: t.y && Array.from(t.y),
                                   z: t.z, line: given(t.line), marker: given(t.marker)})),
        layout: {title: gd.layout.title, range: gd.layout.xaxis.range,
                 yaxis_title: gd.layout.yaxis?.title, shapes: gd.layout.shapes,
                 legend: gd.layout.legend},
    });
    const drawn = {first: pick(first), second: pick(second)};
    const kernelSent = sent.length;
    // the user zooms the first figure: it goes to the kernel, tagged with the view
    await window.Plotly.relayout(first, {"xaxis.range": [1, 2]});
    return {...drawn, acks: sent.slice(0, kernelSent), user: sent.slice(kernelSent)};
}"""


@pytest.fixture(scope="module")
def static_page():
    """A Chromium page on a loopback server that publishes the unpacked plotly.js build."""
    handler = functools.partial(_QuietHandler, directory=str(bundle_directory()))
    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), handler)
    threading.Thread(target=server.serve_forever, daemon=True).start()
    try:
        with chromium() as browser:
            page = browser.new_page()
            page.goto(f"http://127.0.0.1:{server.server_address[1]}/"
                      f"plotly-cartesian.LICENSE.txt")
            yield page
    finally:
        server.shutdown()
        server.server_close()


class _QuietHandler(http.server.SimpleHTTPRequestHandler):
    def log_message(self, format, *args):
        pass


def test_front_end_copy_matches_plotly_after_every_kind_of_edit(static_page, monkeypatch):
    # the front end exactly as the figures carry it, pointed at this server's copy of the build
    monkeypatch.setenv(BUNDLE_ADDRESS_ENV, bundle_address(static_prefix="/"))
    source = figure_widget_class()._esm
    errors: list[str] = []
    static_page.on("pageerror", lambda e: errors.append(str(e)))
    static_page.on("console", lambda m: errors.append(m.text)
                   if m.type == "error" and "circlesim" in m.text else None)
    out = static_page.evaluate(_RUN, [source, _FIGURE, _EDITS])
    assert not errors, errors

    # drawn edit by edit through plotly.js == drawn afresh from the front end's copy
    first, second = out["first"], out["second"]
    assert first["data"] == second["data"]
    assert first["layout"] == second["layout"]
    # ... and the edits did what the kernel asked (spot checks on the result)
    assert [t["uid"] for t in first["data"]] == ["a", "b"]  # "c" moved first, then deleted
    a, b = first["data"]
    assert a["y"] == [5, 6, 7] and a["x"] == [0, 1, 2] and a["line"] is None
    assert a["name"] == "renamed" and a["marker"] == {"size": 9}  # index 1 after the move
    assert b["name"] == "b" and b["x"] == [0, 0.5, 1] and b["y"] == [3, 4]
    assert first["layout"]["title"]["text"] == "after"
    assert first["layout"]["range"] == [0, 5]
    assert first["layout"]["shapes"][0]["y0"] == 2
    assert "text" not in (first["layout"]["yaxis_title"] or {})

    # every edit the kernel numbered is acknowledged, with that number
    traces = [m["trace_edit_id"] for name, m in out["acks"] if name == "_js2py_traceDeltas"]
    layouts = [m["layout_edit_id"] for name, m in out["acks"] if name == "_js2py_layoutDelta"]
    assert traces == [1, 2, 3, 4, 5] and layouts == [1, 2, 3, 4, 5, 6]
    # the user's zoom reaches the kernel, once, from the view it was made in
    assert [name for name, _ in out["user"]] == ["_js2py_relayout"]
    zoom = out["user"][0][1]
    assert zoom["relayout_data"] == {"xaxis.range": [1, 2]}
    assert zoom["source_view_id"].startswith("view-")
