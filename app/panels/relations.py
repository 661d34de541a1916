"""The relations step: exact linear relations and sharp bounds among the invariants, with the
objects that attain or break them."""

from __future__ import annotations

import pandas as pd
import streamlit as st

from analysis.relations import NEAR_MEANING
from analysis.report import FOLD_LIMIT
from app import display, settings
from app.figure_view import show_figures

ROWS_SHOWN = 200
NONE_CHOSEN = "(choose a relation or bound)"


def describe(params: dict, result=None) -> str:
    chosen = params.get("columns")
    where = "every numeric invariant" if not chosen else (
        ", ".join(chosen) if len(chosen) <= FOLD_LIMIT else f"{len(chosen)} chosen columns")
    return f"exact relations and sharp bounds among {where}"


def settings_panel(ctx: settings.StepContext) -> None:
    table = ctx.table
    numeric = [c.name for c in table.columns if c.role in ("invariant", "flag")
               and c.dtype in ("integer", "big integer", "rational", "boolean", "real")]
    defaults = [c for c in numeric if table.column(c).role in ("invariant", "flag")]
    settings.columns(ctx, "columns", numeric, defaults)
    left, middle, right = st.columns(3)
    settings.flag(ctx, "robust", container=left)
    settings.flag(ctx, "bounds", container=middle)
    settings.flag(ctx, "triples", container=right)
    left, middle, right = st.columns(3)
    settings.real_number(ctx, "max_breakers", container=left)
    settings.whole_number(ctx, "max_coefficient", container=middle)
    settings.seed(ctx, container=right)


def show(ctx: settings.StepContext, result) -> None:
    table = ctx.table
    exact = [r for r in result.relations if not r.trivial and not r.violations]
    nearly = [r for r in result.relations if not r.trivial and r.violations]
    trivial = [r for r in result.relations if r.trivial]
    st.markdown(f"Searched {display.plural(len(result.columns), 'column')} over "
                f"{display.plural(result.n_rows, 'object')}.")
    st.markdown("##### Relations with no exception")
    if exact:
        for relation in exact:
            _statement(relation.terms, "=", relation.constant, relation.text)
            if relation.note:
                st.caption(display.sentence(relation.note))
            if relation.consistent_with:
                st.caption(_consistent_words(relation))
    else:
        st.caption("None among these columns.")
    if nearly:
        st.markdown("##### Relations that all but a few objects obey")
        st.dataframe(pd.DataFrame([{
            "relation": r.text, "holds on": r.holds_on, "broken by": len(r.violations),
            "first objects breaking it": _ids(r.violations),
            **_consistent_cell(result, r)} for r in nearly]),
            hide_index=True, key=ctx.key("nearly"))
    if result.approximate:
        st.markdown("##### Relations among real columns, to a tolerance")
        for relation in result.approximate:
            st.code(relation.text, language=None)
    if trivial:
        st.caption("Also true, and uninteresting: " + "; ".join(
            f"`{r.text}`" for r in trivial[:8]) + ("…" if len(trivial) > 8 else ""))
    holding = [b for b in result.bounds if not b.violations]
    near = [b for b in result.bounds if b.violations]
    st.markdown("##### Sharp bounds with no exception")
    if holding:
        st.dataframe(pd.DataFrame([{
            "bound": b.text, "attained by": b.attained_count, "close to it": b.near,
            "some objects attaining it": _ids(b.attained_by, total=b.attained_count),
            **_consistent_cell(result, b)} for b in holding]),
            hide_index=True, key=ctx.key("bounds"),
            column_config={"close to it": st.column_config.NumberColumn(help=NEAR_MEANING)})
    else:
        st.caption("None found." if ctx.params.get("bounds", True) else
                   "Not searched: the search for bounds is off in this step's settings.")
    if near:
        st.markdown("##### Bounds that all but a few objects obey")
        st.dataframe(pd.DataFrame([{
            "bound": b.text, "broken by": len(b.violations), "attained by": b.attained_count,
            "objects breaking it": _ids(b.violations),
            **_consistent_cell(result, b)} for b in near]),
            hide_index=True, key=ctx.key("near_bounds"))
    if result.congruences:
        st.markdown("##### Congruences")
        st.dataframe(pd.DataFrame([{
            "congruence": c.text, "holds on": c.holds_on, "broken by": c.violation_count,
            "also gives": ", ".join(f"mod {m}" for m in c.implied_moduli),
            "objects breaking it": _ids(c.violations, total=c.violation_count)}
            for c in result.congruences]), hide_index=True, key=ctx.key("congruences"))
    _breakers_action(ctx, result, nearly, near)
    _rows_of_choice(ctx, table, result, nearly)
    show_figures(result, table, ctx.key("figures"), vector=ctx.vector)
    st.caption(result.caveat)
    display.notes(result.notes)


def _consistent_words(statement) -> str:
    count = len(statement.consistent_with)
    return (f"Consistent with {display.plural(count, 'object')} known only by an interval "
            f"(first: {_ids(statement.consistent_with)}); an interval row breaks a statement "
            "only when every value in it does.")


def _consistent_cell(result, statement) -> dict:
    """The column of objects known by an interval that a statement leaves open, shown only
    when some statement of the result has one."""
    if not any(s.consistent_with for s in (*result.relations, *result.bounds)):
        return {}
    return {"consistent interval rows": len(statement.consistent_with)}


def _statement(terms, relation: str, constant, text: str) -> None:
    st.latex(display.linear_latex(terms, relation, constant))
    st.code(text, language=None)


def _ids(ids, limit: int = 6, total: int | None = None) -> str:
    ids = list(ids)
    total = len(ids) if total is None else total
    shown = ", ".join(str(display.cell(v)) for v in ids[:limit])
    return shown + (f", … ({total} in all)" if total > limit else "")


OWN_STATEMENT = "a statement of my own…"


def _breakers_action(ctx, result, nearly, near) -> None:
    """One action per statement a few objects break, or one the user writes: a separator
    step whose target is "breaks this statement", to ask whether the breakers can be told
    apart."""
    from analysis.derived import Statement
    from analysis.errors import StepError
    from app import study_section

    statements = {s.text: s for s in (*nearly, *near, *(c for c in result.congruences
                                                       if c.violation_count))}
    left, right = st.columns([3, 1], vertical_alignment="bottom")
    chosen = left.selectbox("What sets the objects that break a statement apart?",
                            [*statements, OWN_STATEMENT], key=ctx.key("breaks_choice"))
    if chosen != OWN_STATEMENT:
        statement = Statement.from_json(statements[chosen].to_json())
    else:
        text = st.text_input("Statement", key=ctx.key("breaks_text"),
                             placeholder=_example_statement(ctx.table),
                             help="A sum of coefficient*column terms, then =, <=, >= or "
                                  "≡ r (mod m), then a number.")
        if not text.strip():
            return
        try:
            statement = Statement.parse(text)
            unknown = [name for name, _ in statement.terms
                       if name not in {c.name for c in ctx.table.columns}]
            if unknown:
                raise StepError(f"the table has no column {unknown[0]!r}.")
        except StepError as exc:
            st.error(f"{exc}")
            return
    right.button("Add a separator step", key=ctx.key("breaks_add"), icon=":material/add:",
                 width="stretch", on_click=study_section.add_step_with,
                 args=("separator", {"target_statement": statement.to_json()}))


def _rows_of_choice(ctx, table, result, nearly) -> None:
    """The objects that attain a chosen bound or break a chosen relation, listed in full."""
    choices = {}
    for bound in result.bounds:
        if bound.attained_by:
            choices[f"attain {bound.text}"] = (bound.terms, bound.attained_by)
        if bound.violations:
            choices[f"break {bound.text}"] = (bound.terms, bound.violations)
    for relation in nearly:
        choices[f"break {relation.text}"] = (relation.terms, relation.violations)
    if not choices:
        return
    key = ctx.key("rows_of")
    options = [NONE_CHOSEN] + list(choices)
    if st.session_state.get(key) not in options:
        st.session_state[key] = NONE_CHOSEN
    chosen = st.selectbox("List the objects that", options, key=key)
    if chosen == NONE_CHOSEN:
        return
    terms, ids = choices[chosen]
    columns = [name for name, _ in terms]
    ids = list(ids)
    if len(ids) > ROWS_SHOWN:
        st.caption(f"The first {ROWS_SHOWN} of {len(ids)}.")
    st.dataframe(display.rows_frame(table, ids[:ROWS_SHOWN], columns), hide_index=True,
                 key=ctx.key("rows_of_table"))


def _example_statement(table) -> str:
    """An example statement in the table's own numeric columns, for the empty text box."""
    numeric = [c.name for c in table.columns if c.role == "invariant"
               and c.dtype in ("integer", "big integer", "rational", "real")]
    if len(numeric) >= 2:
        return f"{numeric[0]} - 2*{numeric[1]} <= 0"
    return f"{numeric[0]} >= 0" if numeric else "a - 2*b <= 0"
