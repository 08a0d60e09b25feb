"""Plain-language and LaTeX renderings of a frozen model's equation.

The renderings are written for a paper's appendix and for a reader who wants
to compute a prediction by hand: the linear predictor term by term, how each
spline column is formed from its knots, and how the level probabilities
follow from the thresholds through the link.  The functions read the fields
of a :class:`riskvet.modelling.modelfile.PredictionModel`; this module imports
nothing of the package, so the model file can use it.
"""

from __future__ import annotations

from typing import Any

__all__ = ["plain_equation", "latex_equation"]

_LINK_TEXT = {
    "logit": ("expit", "expit(t) = 1 / (1 + exp(-t))"),
    "probit": ("Phi", "Phi is the standard normal distribution function"),
    "cloglog": ("G", "G(t) = 1 - exp(-exp(t))"),
    "loglog": ("H", "H(t) = exp(-exp(-t))"),
}
_LINK_TEX = {"logit": r"\operatorname{expit}", "probit": r"\Phi", "cloglog": r"G", "loglog": r"H"}


def _num(value: float, digits: int) -> str:
    return f"{value:.{digits}g}" if abs(value) < 10 ** -(digits - 1) and value != 0 else f"{value:.{digits}f}"


def _spline_notes(model: Any, digits: int) -> list[str]:
    notes = []
    for term in model.design.terms:
        if term.kind != "spline":
            continue
        t = [float(v) for v in term.knots]
        knots = ", ".join(_num(v, digits) for v in t)
        k = len(t)
        notes.append(
            f"Spline of {term.sources[0]} with knots t1..t{k} = {knots}: "
            f"for j = 1..{k - 2}, {term.sources[0]}_nonlin<j> = [ (x - tj)+^3 - (x - t{k - 1})+^3 (t{k} - tj)/(t{k} - t{k - 1}) "
            f"+ (x - t{k})+^3 (t{k - 1} - tj)/(t{k} - t{k - 1}) ] / (t{k} - t1)^2, where (u)+ = max(u, 0) and x = {term.sources[0]}."
        )
    return notes


def _category_notes(model: Any) -> list[str]:
    notes = []
    for term in model.design.terms:
        if term.kind == "categorical":
            notes.append(f"{term.sources[0]}=<level> is 1 for that level and 0 otherwise; reference level {term.reference!r}.")
        elif term.kind == "interaction":
            notes.append(f"{term.name} columns are products of the columns of {term.parts[0].name} and {term.parts[1].name}.")
    return notes


def plain_equation(model: Any, *, digits: int = 4) -> str:
    """The model equation in plain language.

    Parameters
    ----------
    model : PredictionModel
    digits : int
        Decimals shown for each number.
    """
    levels = model.levels
    fname, fnote = _LINK_TEXT[model.link]
    lines = []
    cuts = range(model.thresholds.size)
    if model.proportional:
        parts = [f"{_num(b, digits)} x {c}" for c, b in zip(model.design.columns, model.coef)]
        lines.append("LP = " + (" + ".join(parts) if parts else "0").replace("+ -", "- "))
        if len(levels) == 2:
            # a binary model read the usual way: intercept -theta, P(event) = F(intercept + LP) for the logit
            # and probit links (symmetric); for cloglog and loglog 1 - F(theta - LP) is kept as it is
            if model.link in ("logit", "probit"):
                lines.append(f"P({levels[1]}) = {fname}({_num(-model.thresholds[0], digits)} + LP)   (intercept {_num(-model.thresholds[0], digits)})")
            else:
                lines.append(f"P({levels[1]}) = 1 - {fname}({_num(model.thresholds[0], digits)} - LP)")
            lines.append(f"P({levels[0]}) = 1 - P({levels[1]}).")
            lines.append(f"Here {fnote}.")
            lines += _spline_notes(model, digits)
            lines += _category_notes(model)
            return "\n".join(lines)
        for j in cuts:
            lines.append(f"P({_event(levels, j)}) = 1 - {fname}({_num(model.thresholds[j], digits)} - LP)")
    else:
        for j in cuts:
            parts = [f"{_num(b, digits)} x {c}" for c, b in zip(model.design.columns, model.coef[:, j])]
            lines.append(f"LP{j + 1} = " + (" + ".join(parts) if parts else "0").replace("+ -", "- "))
            lines.append(f"P({_event(levels, j)}) = 1 - {fname}({_num(model.thresholds[j], digits)} - LP{j + 1})")
    lines.append(f"P({levels[0]}) = 1 - P({_event(levels, 0)}); each other level is the difference of consecutive cumulative probabilities.")
    lines.append(f"Here {fnote}.")
    lines += _spline_notes(model, digits)
    lines += _category_notes(model)
    return "\n".join(lines)


def _event(levels: Any, cut: int) -> str:
    """The event of a cut as pages name it: the level "or higher", or the top level alone."""
    return str(levels[cut + 1]) if cut == len(levels) - 2 else f"{levels[cut + 1]} or higher"


def _tex_name(column: str) -> str:
    return r"\mathrm{" + column.replace("_", r"\_").replace("=", "{=}").replace(":", r"{\times}") + "}"


def latex_equation(model: Any, *, digits: int = 4) -> str:
    """The model equation as a LaTeX ``align*`` block."""
    F = _LINK_TEX[model.link]
    levels = [lv.replace("_", r"\_") for lv in model.levels]
    rows = []

    def lp(coef, name):
        terms = [f"{_num(b, digits)}\\,{_tex_name(c)}" for c, b in zip(model.design.columns, coef)]
        body = " + ".join(terms).replace("+ -", "- ") if terms else "0"
        return f"{name} &= {body}"

    if model.proportional:
        rows.append(lp(model.coef, r"\mathrm{LP}"))
        for j in range(model.thresholds.size):
            rows.append(rf"P(Y \geq \text{{{levels[j + 1]}}}) &= 1 - {F}\left({_num(model.thresholds[j], digits)} - \mathrm{{LP}}\right)")
    else:
        for j in range(model.thresholds.size):
            rows.append(lp(model.coef[:, j], rf"\mathrm{{LP}}_{{{j + 1}}}"))
            rows.append(rf"P(Y \geq \text{{{levels[j + 1]}}}) &= 1 - {F}\left({_num(model.thresholds[j], digits)} - \mathrm{{LP}}_{{{j + 1}}}\right)")
    return "\\begin{align*}\n" + " \\\\\n".join(rows) + "\n\\end{align*}"
