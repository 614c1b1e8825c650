// The planner's figures in the browser: the front end of plotly's Python `FigureWidget`,
// drawn with the cartesian build of plotly.js served beside it (a third of the full build's
// size; it starts in under half the time). circlesim.app.plotly_bundle fills in
// PLOTLY_ADDRESS.
//
// The kernel sends the figure (`_widget_data`, `_widget_layout`, `_config`) and then edits as
// `_py2js_*` messages; this module keeps the figure as the kernel knows it, applies each edit to
// every drawn view, and acknowledges it (`_js2py_traceDeltas`, `_js2py_layoutDelta`, without
// plotly's filled-in defaults). Zooming, panning and legend clicks go back to the kernel as
// `_js2py_relayout` and `_js2py_restyle`, so the Python figure follows what the user sees.

const PLOTLY_ADDRESS = __PLOTLY_ADDRESS__;

const page = JSON.parse(document.getElementById("jupyter-config-data")?.textContent ?? "{}");
const plotlyUrl = new URL(PLOTLY_ADDRESS, new URL(page.baseUrl ?? "/", document.baseURI)).href;

// plotly.js is a classic script that defines window.Plotly. The planner's page runs it as it
// loads (<script id="circlesim-plotly">); elsewhere, or if that failed, run it once here.
function loadPlotly() {
  if (window.Plotly) return Promise.resolve(window.Plotly);
  window.circlesimPlotly ??= new Promise((resolve, reject) => {
    const onPage = document.getElementById("circlesim-plotly");
    const script = onPage && !onPage.dataset.failed ? onPage : document.createElement("script");
    script.addEventListener("load", () => resolve(window.Plotly));
    script.addEventListener("error", () => {
      window.circlesimPlotly = undefined;
      reject(new Error(`could not load plotly.js from ${script.src}`));
    });
    if (script !== onPage) {
      script.src = plotlyUrl;
      document.head.appendChild(script);
    }
  });
  return window.circlesimPlotly;
}

const TYPED = {
  int8: Int8Array, uint8: Uint8Array, int16: Int16Array, uint16: Uint16Array,
  int32: Int32Array, uint32: Uint32Array, float32: Float32Array, float64: Float64Array,
};

// Undo plotly's serialiser: numpy arrays arrive as {buffer, dtype, shape}, Undefined as a tag.
function fromKernel(value) {
  if (value === "_undefined_") return undefined;
  if (Array.isArray(value)) return value.map(fromKernel);
  if (value instanceof DataView) return value;
  if (value !== null && typeof value === "object") {
    if (value.buffer instanceof DataView && value.dtype in TYPED) {
      const view = value.buffer;
      const bytes = view.buffer.slice(view.byteOffset, view.byteOffset + view.byteLength);
      return new TYPED[value.dtype](bytes);
    }
    const out = {};
    for (const [key, item] of Object.entries(value)) out[key] = fromKernel(item);
    return out;
  }
  return value;
}

// "shapes[2].line.color" -> ["shapes", 2, "line", "color"]
function splitPath(path) {
  const keys = [];
  for (const part of path.split(".")) {
    const match = /^([^[\]]*)((?:\[\d+\])*)$/.exec(part);
    if (!match) { keys.push(part); continue; }
    if (match[1]) keys.push(match[1]);
    for (const index of match[2].matchAll(/\[(\d+)\]/g)) keys.push(Number(index[1]));
  }
  return keys;
}

// Set (or, for null, remove) the value at `keys` inside `target`, as Plotly.relayout does.
function setPath(target, keys, value) {
  let node = target;
  for (let i = 0; i < keys.length - 1; i++) {
    if (node[keys[i]] === null || typeof node[keys[i]] !== "object") {
      if (value === null) return;
      node[keys[i]] = typeof keys[i + 1] === "number" ? [] : {};
    }
    node = node[keys[i]];
  }
  const last = keys[keys.length - 1];
  if (value === null) {
    if (Array.isArray(node) && typeof last === "number") node.splice(last, 1);
    else delete node[last];
  } else {
    node[last] = value;
  }
}

function applyRelayout(layout, relayoutData) {
  for (const [path, value] of Object.entries(relayoutData ?? {})) {
    if (value !== undefined) setPath(layout, splitPath(path), value);
  }
}

// Plotly.restyle's rule: the i-th listed trace takes values[i % values.length].
function applyRestyle(data, restyleData, traces) {
  const indexes = traces ?? data.map((_, i) => i);
  for (const [path, values] of Object.entries(restyleData ?? {})) {
    const keys = splitPath(path);
    indexes.forEach((trace, i) => {
      const value = Array.isArray(values) ? values[i % values.length] : values;
      if (value !== undefined) setPath(data[trace], keys, value);
    });
  }
}

function moveTraces(data, from, to) {
  const moving = from.map((i) => data[i]);
  const rest = data.filter((_, i) => !from.includes(i));
  const order = from.map((_, k) => [to[k], moving[k]]).sort((a, b) => a[0] - b[0]);
  for (const [index, trace] of order) rest.splice(index, 0, trace);
  data.splice(0, data.length, ...rest);
}

export default () => {
  let figure = null; // {data, layout, config}: the figure as the kernel knows it
  const views = new Set();

  // tell the kernel an edit is done (it waits for this before calling on_edits_completed)
  const acknowledge = (model, message) => {
    if (message.trace_edit_id === undefined && message.layout_edit_id === undefined) return;
    if (message.trace_edit_id !== undefined) {
      model.set("_js2py_traceDeltas", { trace_deltas: [], trace_edit_id: message.trace_edit_id });
    }
    if (message.layout_edit_id !== undefined) {
      model.set("_js2py_layoutDelta", { layout_delta: {}, layout_edit_id: message.layout_edit_id });
    }
    model.save_changes();
  };

  // each edit: [how it changes our copy, how it changes a drawn view]
  const edits = {
    _py2js_restyle: [
      (m) => applyRestyle(figure.data, m.restyle_data, m.restyle_traces),
      (P, gd, m) => P.restyle(gd, m.restyle_data, m.restyle_traces)],
    _py2js_relayout: [
      (m) => applyRelayout(figure.layout, m.relayout_data),
      (P, gd, m) => P.relayout(gd, m.relayout_data)],
    _py2js_update: [
      (m) => { applyRestyle(figure.data, m.style_data, m.style_traces);
        applyRelayout(figure.layout, m.layout_data); },
      (P, gd, m) => P.update(gd, m.style_data, m.layout_data, m.style_traces)],
    _py2js_addTraces: [
      (m) => figure.data.push(...m.trace_data),
      (P, gd, m) => P.addTraces(gd, m.trace_data)],
    _py2js_deleteTraces: [
      (m) => [...m.delete_inds].sort((a, b) => b - a).forEach((i) => figure.data.splice(i, 1)),
      (P, gd, m) => P.deleteTraces(gd, m.delete_inds)],
    _py2js_moveTraces: [
      (m) => moveTraces(figure.data, m.current_trace_inds, m.new_trace_inds),
      (P, gd, m) => P.moveTraces(gd, m.current_trace_inds, m.new_trace_inds)],
    _py2js_animate: [
      (m) => { // style_data[k]: {path: value} for trace style_traces[k]
        (m.style_data ?? []).forEach((style, k) => applyRestyle(figure.data,
          Object.fromEntries(Object.entries(style).map(([path, value]) => [path, [value]])),
          [m.style_traces[k]]));
        applyRelayout(figure.layout, m.layout_data); },
      (P, gd, m) => P.animate(gd, { data: m.style_data, layout: m.layout_data,
        traces: m.style_traces }, m.animation_opts)],
    _py2js_removeLayoutProps: [
      (m) => m.remove_props.forEach((keys) => setPath(figure.layout, keys, null)),
      (P, gd, m) => P.relayout(gd, Object.fromEntries(m.remove_props.map((k) => [k.join("."), null])))],
    _py2js_removeTraceProps: [
      (m) => m.remove_props.forEach((keys) => setPath(figure.data[m.remove_trace], keys, null)),
      (P, gd, m) => P.restyle(gd, Object.fromEntries(m.remove_props.map((k) => [k.join("."), null])),
        [m.remove_trace])],
  };

  return {
    initialize({ model }) {
      figure = {
        data: fromKernel(model.get("_widget_data")) ?? [],
        layout: fromKernel(model.get("_widget_layout")) ?? {},
        config: fromKernel(model.get("_config")) ?? {},
      };
      for (const [name, [change, draw]] of Object.entries(edits)) {
        model.on(`change:${name}`, () => {
          const message = fromKernel(model.get(name));
          if (!message) return;
          change(structuredClone(message));
          for (const view of views) view.apply(draw, message);
          acknowledge(model, message);
        });
      }
      // the kernel sets these again just before it shows the figure
      model.on("change:_widget_data", () => { figure.data = fromKernel(model.get("_widget_data")); });
      model.on("change:_widget_layout", () => {
        figure.layout = fromKernel(model.get("_widget_layout"));
      });
      model.on("change:_config", () => { figure.config = fromKernel(model.get("_config")); });
    },

    render({ model, el }) {
      const id = `view-${Math.random().toString(36).slice(2)}`;
      let Plotly = null;
      let started = false; // drawn from our copy: later edits must be applied to it
      let queue = Promise.resolve(); // edits reach the view in order, after its first draw
      let ours = 0; // > 0 while the view applies the kernel's edits (not the user's)
      let frame = 0;
      let closed = false;
      const report = (error) => console.error("circlesim figure:", error);

      const view = {
        apply(draw, message) {
          if (!started || message.source_view_id === id) return;
          const own = structuredClone(message);
          queue = queue.then(async () => {
            if (closed) return;
            ours += 1;
            try { await draw(Plotly, el, own); } finally { ours -= 1; }
          }).catch(report);
        },
      };
      const send = (name, message) => {
        model.set(name, { ...message, source_view_id: id });
        model.save_changes();
      };
      // the user's zooming, panning and legend clicks (resizing is the page's, not the figure's)
      const listen = () => {
        el.on("plotly_relayout", (relayoutData) => {
          const { lastInputTime, autosize, width, height, ...edit } = relayoutData;
          if (!ours && Object.keys(edit).length) send("_js2py_relayout", { relayout_data: edit });
        });
        el.on("plotly_restyle", ([styleData, traces]) => {
          if (!ours) send("_js2py_restyle", { style_data: styleData, style_traces: traces });
        });
      };
      // draw only once the element is on the page: plotly measures text in a placed element
      const placed = new Promise((resolve) => {
        const wait = () => {
          if (closed || el.isConnected) resolve();
          else frame = requestAnimationFrame(wait);
        };
        wait();
      });
      views.add(view);
      queue = placed.then(loadPlotly).then(async (P) => {
        if (closed) return;
        Plotly = P;
        started = true;
        ours += 1;
        try {
          await P.newPlot(el, structuredClone(figure.data), structuredClone(figure.layout),
            figure.config);
        } finally { ours -= 1; }
        listen();
      }).catch(report);

      return () => {
        closed = true;
        views.delete(view);
        cancelAnimationFrame(frame);
        if (Plotly) Plotly.purge(el);
      };
    },
  };
};
