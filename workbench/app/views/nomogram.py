"""Nomogram: the clinical-only and the clinical + imaging model, side by side, with downloads."""

from __future__ import annotations

import streamlit as st

from workbench.app import charts, nomo, state, tables
from workbench.app.messages import plain
from workbench.units import time_phrase, unit_after_list

FORMATS = (("png", "PNG", "image/png"), ("svg", "SVG", "image/svg+xml"), ("pdf", "PDF", "application/pdf"))


@st.cache_resource(show_spinner="Drawing the nomogram...", max_entries=8)
def _drawing(run_key: tuple, models: tuple, horizons: tuple, layout: str, _scales):
    """The nomogram figure (cached on the run, models, horizons and layout)."""
    draw = state.load_module("workbench.figures.nomogram")
    return draw.plot_nomogram(_scales, titles=[tables.label(m) for m in models], layout=layout)


@st.cache_data(show_spinner=False, max_entries=8)
def _screen(run_key: tuple, models: tuple, horizons: tuple, layout: str, _fig) -> str:
    # SVG: quicker to write than a PNG of the nomogram's many ticks, and sharp when zoomed
    return charts.screen_svg(_fig)


def _files(run_key: tuple, models: tuple, horizons: tuple, layout: str, scales) -> dict:
    """The PNG for the page at once; the files (PNG at 300 dpi, SVG, PDF) written when their button is pressed."""
    fig = _drawing(run_key, models, horizons, layout, scales)
    out = {"screen": _screen(run_key, models, horizons, layout, fig)}
    for fmt, _, _ in FORMATS:
        out[fmt] = lambda f=fig, x=fmt: nomo.save_figure(f, x)
    return out


def render() -> None:
    st.title("Nomogram")
    st.write("Read each predictor's points off its axis, add them up on the total-points axis, and read the "
             "predicted survival below it.")
    if not state.module_available("workbench.workflow") or not state.module_available("workbench.figures.nomogram_points"):
        state.not_available("The nomogram")
        return
    result = state.current_result()
    if result is None:
        st.info("Run the study on the Results page first; the nomogram is drawn from the fitted models.")
        return
    names = nomo.nomogram_models(result)
    if not names:
        st.info("This study fits neither the clinical nor the clinical + imaging Cox model, which the nomogram needs.")
        return
    state.show_provenance("The nomogram and its points")
    u = result.validation.time_unit
    hz_all = [float(h) for h in result.spec.horizons]
    longest = float(result.cohort.time.max())
    a, b, c = st.columns([2, 2, 1])
    chosen = a.multiselect("Models", names, default=names, format_func=tables.label, key="nomo_models")
    hz = b.multiselect(f"Survival axes at ({u})", hz_all, default=hz_all, key="nomo_horizons",
                       format_func=lambda h: time_phrase(h, u))
    extra = b.text_input(f"Other times ({u}, comma separated)", "", key="nomo_extra",
                         help=f"Any time inside the follow-up (up to {longest:g} {u}); the fitted models give "
                              "survival at every time, not only at the study's horizons.")
    layout = c.radio("Layout", ["columns", "rows"], format_func={"columns": "side by side", "rows": "stacked"}.get,
                     key="nomo_layout")
    more = []
    for x in extra.replace(";", ",").split(","):
        if not x.strip():
            continue
        try:
            v = float(x)
        except ValueError:
            st.warning(plain(f"{x.strip()!r} is not a number; write times such as 18, 30."))
            continue
        if 0 < v <= longest:
            more.append(v)
        else:
            st.warning(f"{time_phrase(v, u)} is outside the follow-up (0 to {longest:g} {u}) and is left out.")
    hz = tuple(sorted(set(hz) | set(more)))
    if not chosen or not hz:
        st.info("Choose at least one model and one horizon.")
        return
    key = state.result_job().key
    spec = result.spec
    tag = "_".join(f"{h:g}" for h in hz) + u
    try:
        scales = [nomo.scales_for(key, m, hz, result) for m in chosen]
    except Exception as exc:  # noqa: BLE001
        state.show_error("Building the nomogram", exc)
        return
    if not state.module_available("workbench.figures.nomogram"):
        state.not_available("The nomogram drawing")
        files = None
    else:
        try:
            files = _files(key, tuple(chosen), hz, layout, scales)
        except Exception as exc:  # noqa: BLE001
            state.show_error("Drawing the nomogram", exc)
            files = None
    if files is not None:
        st.image(files["screen"], width="stretch")
        st.caption(f"Survival axes at {', '.join(f'{h:g}' for h in hz)} {unit_after_list(hz, u)}.")
        cols = st.columns(len(FORMATS) + 1)
        for col, (fmt, text, mime) in zip(cols, FORMATS, strict=False):
            col.download_button(f"Download {text}", files[fmt], mime=mime,
                                file_name=state.study_filename(spec, f".{fmt}", f"nomogram_{tag}"), on_click="ignore",
                                key=f"nomo_dl_{fmt}")
    points = state.load_module("workbench.figures.nomogram_points")
    try:
        tabs = {m: points.points_table(s) for m, s in zip(chosen, scales, strict=True)}
    except Exception as exc:  # noqa: BLE001
        state.show_error("Tabulating the points", exc)
        return
    # the zip and the CSV files below are written only when their button is pressed
    st.download_button("Download the points tables (CSV files, zip)",
                       lambda: nomo.points_table_zip(tabs, state.study_filename(spec, "_", "")),
                       file_name=state.study_filename(spec, ".zip", f"nomogram_points_{tag}"),
                       mime="application/zip", key="nomo_dl_points", on_click="ignore")
    st.subheader("Points table")
    st.caption("Points per predictor value (between two rows of a continuous predictor, interpolate), and the "
               "survival probability for each total. This is what the drawing shows, as numbers.")
    for m in chosen:
        with st.expander(tables.label(m)):
            t = tabs[m]
            left, right = st.columns(2)
            left.dataframe(nomo.rounded_terms(t.terms), hide_index=True, width="stretch", height=320)
            right.dataframe(nomo.rounded_survival(t.survival), hide_index=True, width="stretch", height=320)
            st.download_button(f"Download the {tables.label(m).lower()} points (CSV)",
                               lambda t=t: nomo.rounded_terms(t.terms).to_csv(index=False),
                               file_name=state.study_filename(spec, ".csv", f"{m}_points"), mime="text/csv",
                               key=f"nomo_dl_csv_{m}", on_click="ignore")


if __name__ == "__main__":
    render()
