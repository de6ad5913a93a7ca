"""Results computed for another version of the scenario: marked, greyed out, never exported.

The long jobs (sweep, frontier, search, ensemble, fit) leave their result on the page until
they run again; the scenario may change meanwhile (another file picked, a schedule edited, an
undo). Each such result therefore carries a stamp: the identity of the scenario it was computed
from, ``{"what", "source", "key"}`` with ``key`` the scenario key of ``webapp.compute`` (a hash of
the scenario's canonical JSON) and ``source`` its file name.

- When a job starts, the page notes the identity of the working scenario it was given (the
  same store value the job reads, at the same moment); when the job's figure arrives, that note
  becomes the stamp of the result shown (a blank figure, as a stopped job leaves, has none).
- Whenever the working scenario or a stamp changes, one callback compares them: a result whose
  key differs (or whose scenario has values still to fix in the editor) gets a banner saying
  so and what to do, its figures and tables are greyed out, its download buttons are disabled
  with the reason beside them, and a button acting on it ("Add to comparison") is disabled.
- The same rule serves server-side checks: :func:`refusal` says why an export or an action on
  a result must be refused, from the stamps the page sends.

Freshness is decided by content: two files with the same scenario give the same results, so
"Save as" (new file name, same scenario) keeps results current; the file name is recorded to
say which scenario a stale result came from.
"""

from __future__ import annotations

from dataclasses import dataclass

from dash import Input, Output, State, dcc, html, no_update

from webapp import compute, ids

REFUSED = "Not available: "  # how a refusal beside a button starts (and is recognised)
# Greyed out through the style (a graph redraws on a change of style, not of class); the keys
# are removed again when the result is current, leaving any other style as it was.
STALE_STYLE = {"opacity": 0.4, "filter": "grayscale(1)"}


@dataclass(frozen=True)
class Tracked:
    """A result that stays on the page after its job: ``what`` is the job's name and the
    ``what`` of its download buttons; ``started_by`` the (component, property) whose change
    starts the job; ``shown_in`` the graph whose figure shows the result; ``dims`` what is
    greyed out while it is stale; ``actions`` buttons acting on the result, each with its
    message line and the store that holds what it acts on (button, message, store)."""

    what: str
    label: str  # subject of the banner's sentence: "The sweep below"
    again: str  # what to do: "run the sweep again"
    started_by: tuple[str, str]
    shown_in: str
    dims: tuple[str, ...]
    actions: tuple[tuple[str, str, str], ...] = ()


TRACKED = (
    Tracked(
        "sweep",
        "The sweep below",
        "run the sweep again",
        (ids.SWEEP_RUN, "n_clicks"),
        ids.SWEEP_GRAPH,
        (ids.SWEEP_GRAPH, ids.SWEEP_SUMMARY),
    ),
    Tracked(
        "frontier",
        "The recovery frontier below",
        "draw the frontier again",
        (ids.FRONTIER_RUN, "n_clicks"),
        ids.FRONTIER_GRAPH,
        (ids.FRONTIER_GRAPH,),
    ),
    Tracked(
        "search",
        "The cheapest schedule below",
        "find the cheapest schedule again",
        (ids.SEARCH_RUN, "n_clicks"),
        ids.SEARCH_GRAPH,
        (ids.SEARCH_GRAPH, ids.SEARCH_SUMMARY),
        actions=((ids.SEARCH_ADD, ids.SEARCH_ADD_MESSAGE, ids.SEARCH_FOUND),),
    ),
    Tracked(
        "ensemble",
        "The uncertainty run below",
        "run it again",
        (ids.ENSEMBLE_RUN, "n_clicks"),
        ids.ENSEMBLE_GRAPH,
        (ids.ENSEMBLE_GRAPH, ids.ENSEMBLE_TABLE, ids.ENSEMBLE_FAN_GRAPH),
    ),
    Tracked(
        "fit",
        "The fit below",
        "upload the monitoring record again to fit this scenario",
        (ids.DATA_UPLOAD, "contents"),
        ids.DATA_FIT_GRAPH,
        (ids.DATA_FIT_GRAPH, ids.DATA_DIAGRAM_GRAPH, ids.DATA_SUMMARY),
    ),
)
BY_NAME = {tracked.what: tracked for tracked in TRACKED}


# ---------------------------------------------------------------------------------------------
# the rule


def identity(working: dict | None) -> dict | None:
    """``{"source", "key"}`` of the working scenario (None before there is one)."""
    if not working or not working.get("data"):
        return None
    key = working.get("key") or compute.scenario_key(working["data"])
    return {"source": working.get("source") or "", "key": key}


def stale_reason(stamp: dict | None, working: dict | None) -> str | None:
    """Why the result stamped ``stamp`` no longer belongs to the scenario in the editor, in
    words that follow "was"; None when it does (or when no result is shown)."""
    current = identity(working)
    if not stamp or current is None:
        return None
    if stamp.get("key") != current["key"]:
        if stamp.get("source") != current["source"]:
            return (
                f"computed for {stamp.get('source') or 'another scenario'}, not for the "
                f"scenario open now ({current['source']})"
            )
        return "computed for an earlier version of this scenario"
    if working.get("stale"):
        return "computed for the last valid values; the schedule editor has values to fix"
    return None


def banner_text(what: str, reason: str) -> str:
    tracked = BY_NAME[what]
    return f"{tracked.label} was {reason} \u2014 {tracked.again}."


def refusal(what: str, working: dict | None, stamps: list | None) -> str | None:
    """Why an export of (or an action on) result ``what`` must be refused now, or None.
    ``stamps``: the data of the result-stamp stores (``State(ids.ALL_RESULT_STAMPS, "data")``).
    Results that are not tracked here are never refused by this rule."""
    if what not in BY_NAME:
        return None
    stamp = next((s for s in stamps or [] if s and s.get("what") == what), None)
    reason = stale_reason(stamp, working)
    if reason is None:
        return None
    return f"{BY_NAME[what].label.removesuffix(' below')} was {reason}; {BY_NAME[what].again} first"


# ---------------------------------------------------------------------------------------------
# layout


def stores() -> list:
    """The stamp stores of every tracked result (placed once on the page)."""
    return [
        store
        for tracked in TRACKED
        for store in (
            dcc.Store(id=ids.run_stamp(tracked.what)),
            dcc.Store(id=ids.result_stamp(tracked.what)),
        )
    ]


def banner(what: str) -> html.Div:
    """The note shown above result ``what`` while it is stale (hidden otherwise)."""
    return html.Div(id=ids.stale_banner(what), className="stale-banner", role="status", hidden=True)


# ---------------------------------------------------------------------------------------------
# callbacks

# In the browser: the identity of the scenario a job is started on (the same WORKING value the
# job is handed), and the stamp of a result once its figure is shown (none for a blank figure).
RUN_STAMP_JS = """
function (started, working) {
    if (!started) { return window.dash_clientside.no_update; }  // reset, not a start
    if (!working || !working.data) { return null; }
    return {what: "%s", source: working.source || "", key: working.key || null};
}
"""
SHOWN_STAMP_JS = """
function (figure, ran) {
    var drawn = figure && figure.data && figure.data.length > 0;
    return drawn && ran ? ran : null;
}
"""


def _with_style(current: dict | None, stale: bool) -> dict:
    style = {k: v for k, v in (current or {}).items() if k not in STALE_STYLE}
    return {**style, **STALE_STYLE} if stale else style


def _refused_or_kept(why: str | None, text: object, *, keep_other: bool = False) -> object:
    """A message line beside a refused button: the reason while refused (with ``keep_other``,
    not over another message such as "Added ..."), cleared once the reason is gone."""
    ours = isinstance(text, str) and text.startswith(REFUSED)
    if why:
        return no_update if keep_other and text and not ours else REFUSED + why + "."
    return "" if ours else no_update


def mark(
    working,
    stamps,
    stamp_ids,
    banner_ids,
    button_ids,
    messages,
    message_ids,
    styles,
    action_texts,
    action_data,
):
    """Working scenario or a stamp changed -> (banner texts, banners hidden, export buttons
    disabled, their titles, export messages, styles of what is greyed out, actions disabled,
    their titles, action messages), in the order :func:`register` declares them.

    ``styles``, ``action_texts`` and ``action_data`` follow ``TRACKED``: the current style of
    each greyed-out component, the current message beside each action button and the data of
    the store each action acts on."""
    reasons = {
        stamp_id["what"]: stale_reason(stamp, working)
        for stamp, stamp_id in zip(stamps, stamp_ids, strict=True)
    }
    texts = [
        banner_text(b["what"], reasons[b["what"]]) if reasons.get(b["what"]) else ""
        for b in banner_ids
    ]
    hidden = [not reasons.get(b["what"]) for b in banner_ids]
    disabled, titles = [], []
    for button in button_ids:
        if button["what"] not in BY_NAME:
            disabled.append(no_update)
            titles.append(no_update)
        else:
            why = refusal(button["what"], working, stamps)
            disabled.append(bool(why))
            titles.append(REFUSED + why if why else "")
    export_messages = [
        _refused_or_kept(refusal(m["what"], working, stamps), text)
        if m["what"] in BY_NAME
        else no_update
        for text, m in zip(messages, message_ids, strict=True)
    ]
    dim_styles = []
    for tracked in TRACKED:
        stale = bool(reasons.get(tracked.what))
        dim_styles += [_with_style(styles.pop(0), stale) for _ in tracked.dims]
    action_disabled, action_titles, action_messages = [], [], []
    for tracked in TRACKED:
        why = refusal(tracked.what, working, stamps)
        for _ in tracked.actions:
            text, data = action_texts.pop(0), action_data.pop(0)
            action_disabled.append(bool(why) or not data)
            action_titles.append(REFUSED + why if why else "")
            action_messages.append(_refused_or_kept(why, text, keep_other=True))
    return (
        texts,
        hidden,
        disabled,
        titles,
        export_messages,
        *dim_styles,
        *action_disabled,
        *action_titles,
        *action_messages,
    )


def register(callback, settings, clientside_callback) -> None:
    """Register the stamps (in the browser, through ``clientside_callback``) and the one
    callback that marks stale results."""
    for tracked in TRACKED:
        component, prop = tracked.started_by
        clientside_callback(
            RUN_STAMP_JS % tracked.what,
            Output(ids.run_stamp(tracked.what), "data"),
            Input(component, prop),
            State(ids.WORKING, "data"),
            prevent_initial_call=True,
        )
        clientside_callback(
            SHOWN_STAMP_JS,
            Output(ids.result_stamp(tracked.what), "data"),
            Input(tracked.shown_in, "figure"),
            State(ids.run_stamp(tracked.what), "data"),
            prevent_initial_call=True,
        )
    dims = [dim for tracked in TRACKED for dim in tracked.dims]
    actions = [action for tracked in TRACKED for action in tracked.actions]
    callback(
        Output(ids.ALL_STALE_BANNERS, "children"),
        Output(ids.ALL_STALE_BANNERS, "hidden"),
        Output(ids.ALL_EXPORT_BUTTONS, "disabled", allow_duplicate=True),
        Output(ids.ALL_EXPORT_BUTTONS, "title", allow_duplicate=True),
        Output(ids.ALL_EXPORT_MESSAGES, "children", allow_duplicate=True),
        *(Output(dim, "style", allow_duplicate=True) for dim in dims),
        *(Output(button, "disabled", allow_duplicate=True) for button, _, _ in actions),
        *(Output(button, "title", allow_duplicate=True) for button, _, _ in actions),
        *(Output(message, "children", allow_duplicate=True) for _, message, _ in actions),
        Input(ids.WORKING, "data"),
        Input(ids.ALL_RESULT_STAMPS, "data"),
        State(ids.ALL_RESULT_STAMPS, "id"),
        State(ids.ALL_STALE_BANNERS, "id"),
        State(ids.ALL_EXPORT_BUTTONS, "id"),
        State(ids.ALL_EXPORT_MESSAGES, "children"),
        State(ids.ALL_EXPORT_MESSAGES, "id"),
        *(State(dim, "style") for dim in dims),
        *(State(message, "children") for _, message, _ in actions),
        *(State(store, "data") for _, _, store in actions),
        prevent_initial_call=True,
    )(_marked)


def _marked(*args):
    """The registered callback: :func:`mark` with the states of ``TRACKED`` split out."""
    fixed, rest = args[:7], args[7:]
    dims = sum(len(tracked.dims) for tracked in TRACKED)
    actions = sum(len(tracked.actions) for tracked in TRACKED)
    return mark(
        *fixed, list(rest[:dims]), list(rest[dims : dims + actions]), list(rest[dims + actions :])
    )
