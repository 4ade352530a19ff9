"""``ohmgraph diagnose NET MEAS.csv``: which single resistor fault best explains the readings."""

from __future__ import annotations

import argparse
import html

import numpy as np

from ohmgraph.engine.readings.contact import DEFAULT_CONTACT_MAX_OHMS
from ohmgraph.engine.readings.diagnosis import SHORT_RATIO, diagnose
from ohmgraph.engine.readings.gls import (DEFAULT_CONTACT_SIGNIFICANCE, DEFAULT_MIN_CHANGE,
                                         DEFAULT_SIGNIFICANCE, MAX_FLAGGED, diagnose_parts)
from ohmgraph.engine.readings.model import compare
from ohmgraph.io.commands.argtypes import finite_float, fraction, whole_number
from ohmgraph.io.commands.part_options import (add_band_arguments, band_rule_text, model_bands,
                                               percent, read_part_tolerances)
from ohmgraph.io.commands.reading_model import (counting_solves, feedback, model_readings,
                                                read_inputs, reading_columns, write_table)
from ohmgraph.io.commands.reading_options import (add_full_precision_argument,
                                                  add_network_arguments, add_output_arguments,
                                                  add_reading_arguments)
from ohmgraph.io.errors import EXIT_OK, InputError
from ohmgraph.io.html_summary import (add_html_argument, page, reading_table_html, table_html,
                                      write_page)
from ohmgraph.io.jsonout import dumps
from ohmgraph.io.numbers import digits_beside, quantity, significant
from ohmgraph.io.provenance import provenance_record

CHI2_DIGITS = 4
UNITS = {"V": "V", "R": "ohm", "I": "A"}
RECHECK = ("caution: before probing again, de-energise and discharge the network for "
           "resistance readings (common practice) and follow local safety rules")


def _ohms(text: str) -> float:
    """A resistance of 0 or more (0: no contact-error test)."""
    value = finite_float(text)
    if value < 0:
        raise argparse.ArgumentTypeError(f"{text!r} must be 0 or more")
    return value


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "diagnose", help="rank single-resistor faults (open, short, value) that explain readings",
        description="Rank single-resistor fault hypotheses (open, short, value change with its "
                    "estimated resistance) by weighted least squares against the readings' "
                    "accuracy bands, using rank-one (Sherman-Morrison) updates of the solved "
                    "network and one adjoint solve per reading. Resistors the readings cannot "
                    "tell apart are listed as one group. With part tolerances (--tolerances, "
                    "--default) the fit is generalised least squares with the covariance of "
                    "the parts and the instrument, readings no hypothesis explains are flagged "
                    "and two-fault hypotheses are tried when no single fault fits. Exit 0 after "
                    "a diagnosis.")
    add_network_arguments(parser)
    add_reading_arguments(parser)
    add_band_arguments(parser)
    parser.add_argument("--significance", type=fraction, default=DEFAULT_SIGNIFICANCE,
                        metavar="P", help="significance of the chi-square tests with part "
                                          f"tolerances (default {DEFAULT_SIGNIFICANCE:g})")
    parser.add_argument("--min-change", type=percent, default=DEFAULT_MIN_CHANGE, metavar="PCT",
                        help="with part tolerances: smallest value change called a fault "
                             f"(default {100 * DEFAULT_MIN_CHANGE:g}%%)")
    parser.add_argument("--max-flagged", type=whole_number(0), default=MAX_FLAGGED,
                        metavar="N", help="most readings flagged as unexplained (default "
                                          f"{MAX_FLAGGED}; 0: none)")
    parser.add_argument("--contact-significance", type=fraction,
                        default=DEFAULT_CONTACT_SIGNIFICANCE, metavar="P",
                        help="with part tolerances: chance that a clean resistance reading is "
                             "flagged as read high by a poor probe contact (default "
                             f"{DEFAULT_CONTACT_SIGNIFICANCE:g})")
    parser.add_argument("--contact-max", type=_ohms, default=DEFAULT_CONTACT_MAX_OHMS,
                        metavar="OHMS", help="largest resistance a poor probe contact is taken "
                        f"to add (default {DEFAULT_CONTACT_MAX_OHMS:g} ohm; 0: no contact test)")
    parser.add_argument("--top", type=whole_number(1), default=10, metavar="K",
                        help="number of hypotheses to rank (default 10)")
    parser.add_argument("--short-ratio", type=fraction, default=SHORT_RATIO, metavar="F",
                        help=f"a short is the resistance times F (default {SHORT_RATIO:g})")
    add_output_arguments(parser)
    add_full_precision_argument(parser)
    add_html_argument(parser)
    parser.set_defaults(run=run, command_group="diagnosis")


def hypothesis_columns(net, result, pairs=()) -> dict:
    """One row per member of every ranked group (``faults`` 1), then one per member of every
    two-fault hypothesis (``faults`` 2, ranked among themselves)."""
    rows = {"rank": [], "branch": [], "kind": [], "nominal_ohms": [], "estimated_ohms": [],
            "chi2": [], "group_size": [], "explains_all": [], "faults": []}

    def add(faults, rank, branch, kind, nominal, estimated, chi2, size, explains):
        for key, value in zip(rows, (rank, str(net.branch_names[branch]), kind, float(nominal),
                                     float(estimated), chi2, size, explains, faults)):
            rows[key].append(value)

    for rank, hypothesis in enumerate(result.hypotheses, start=1):
        for member, branch in enumerate(hypothesis.branches):
            add(1, rank, branch, hypothesis.kinds[member], hypothesis.nominal_ohms[member],
                hypothesis.estimated_ohms[member], hypothesis.chi2,
                int(hypothesis.branches.size), hypothesis.explains_all)
    for rank, pair in enumerate(pairs, start=1):
        for member, branch in enumerate(pair.branches):
            add(2, rank, branch, "value", pair.nominal_ohms[member], pair.estimated_ohms[member],
                pair.chi2, 2, pair.explains_all)
    return {key: np.array(values) for key, values in rows.items()}


def _describe(kind: str, nominal: float, estimated: float) -> str:
    if kind == "open":
        return f"open (model {quantity(nominal, 'ohm')})"
    if kind == "short":
        return f"short (model {quantity(nominal, 'ohm')})"
    return (f"{quantity(estimated, 'ohm')} instead of {quantity(nominal, 'ohm')} "
            f"({estimated / nominal - 1:+.1%})")


def _ranking_lines(net, result, band_word: str) -> list:
    lines = [f"{'rank':>4} {'chi2':>10} {'fits':>4}  hypothesis"]
    marked = any(hypothesis.left_out for hypothesis in result.hypotheses)
    for rank, hypothesis in enumerate(result.hypotheses, start=1):
        fits = ("yes" if hypothesis.explains_all else "no") + ("*" * bool(hypothesis.left_out))
        for member, branch in enumerate(hypothesis.branches):
            head = (f"{rank:>4} {significant(hypothesis.chi2, CHI2_DIGITS):>10} {fits:>4}  "
                    if member == 0
                    else " " * 22)
            lines.append(head + f"{net.branch_names[branch]}: "
                         + _describe(hypothesis.kinds[member], hypothesis.nominal_ohms[member],
                                     hypothesis.estimated_ohms[member]))
        if hypothesis.branches.size > 1:
            lines.append(" " * 22 + f"(the readings cannot tell these {hypothesis.branches.size} "
                                    "apart)")
    if marked:
        lines.append("*: fitted without the flagged reading(s); its chi2 includes the penalty "
                     "for leaving them out (the limits of their tests), so that both kinds of "
                     "hypothesis rank together")
    tied = result.tied_with_best()
    if tied > 1:
        lines.append(f"caution: {tied} hypotheses fit within chi2 + 1 of the best; at this "
                     "accuracy the readings do not single out the first")
    lines.append(f"'fits': every reading within its {band_word} once the fault is assumed. "
                 f"{result.candidates} resistor(s) screened, {result.evaluated} evaluated "
                 f"exactly; {result.solves['adjoint']} adjoint and "
                 f"{result.solves['self_resistance']} self-resistance solve(s); ranking "
                 + ("proven exact" if result.exact else "NOT proven exact"))
    lines += [f"note: {note}" for note in result.notes]
    return lines


def _format(net, result, failed: int, readings: int) -> str:
    lines = [f"{failed} of {readings} reading(s) outside their accuracy; chi-square of the "
             f"model as it is: {significant(result.baseline_chi2, CHI2_DIGITS)} over "
             f"{result.readings_used.size} reading(s)"]
    if not failed:
        lines.append("every reading is within accuracy: no fault is indicated; the ranking "
                     "below is for information only")
    return "\n".join(lines + _ranking_lines(net, result, "band"))


def _reading_name(table, reading: int) -> str:
    kind, a, b = table.readings.kind[reading], table.a[reading], table.b[reading]
    return f"line {table.lines[reading]} ({kind} {a}{' ' + b if b else ''})"


def _flag_line(table, flag, result) -> str:
    """Why a reading is flagged: its offset, the statistic and the limit of its test."""
    unit = UNITS[str(table.readings.kind[flag.reading])]
    digits = digits_beside(flag.shift, flag.shift_std)
    offset = (f"{significant(flag.shift, digits, sign=True)} {unit} "
              f"(standard uncertainty {significant(flag.shift_std, 2)} {unit})")
    statistic = (f"w = {flag.statistic:+.3g} against {np.sqrt(flag.limit):.3g}; "
                 f"leaving it out lowers the best chi2 by {flag.drop:.4g}")
    if flag.test == "contact":
        why = (f"read high by {offset}, as a poor probe contact would (contact-error test, "
               f"one-sided, family-wise significance {result.contact_significance:g}: "
               f"{statistic})")
    else:
        why = (f"off by {offset}, which no hypothesis explains (gross-error test at "
               f"significance {result.significance:g} over the readings: {statistic})")
    return (f"FLAGGED {_reading_name(table, flag.reading)}: {why}. Check its probe contact "
            "and take it again")


def _format_parts(net, table, result, bands) -> str:
    ranking, limits = result.ranking, result.limits
    alpha = f"{result.significance:g}"
    lines = [band_rule_text(bands),
             "fit: generalised least squares, covariance from the part tolerances and the "
             "instrument's accuracy (both uniform within their limits)",
             f"chi-square of the model as it is: {result.first_ranking.baseline_chi2:.4g} over "
             f"{result.first_ranking.readings_used.size} reading(s)"]
    lines += [_flag_line(table, flag, result) for flag in result.flagged]
    if result.flagged:
        lines.append(f"without the flagged reading(s): chi-square of the model as it is "
                     f"{ranking.baseline_chi2:.4g} over {ranking.readings_used.size} reading(s)")
        lines.append(RECHECK)
    if result.fault_indicated:
        lines.append(f"fault indicated: {ranking.baseline_chi2:.4g} > {limits['no_fault']:.4g}, "
                     f"the chi-square limit at significance {alpha}")
    else:
        lines.append(f"no fault indicated: {ranking.baseline_chi2:.4g} <= "
                     f"{limits['no_fault']:.4g}, the chi-square limit at significance {alpha}; "
                     "the ranking below is for information only")
    lines += _ranking_lines(net, ranking, "band (instrument and parts)")
    if result.fault_indicated and not result.single_fits:
        lines.append(f"no single fault fits (best chi2 above {limits['single']:.4g}); best "
                     "two-fault hypotheses among the best single ones:")
        for rank, pair in enumerate(result.pairs, start=1):
            fits = "yes" if pair.explains_all else "no"
            members = "; ".join(
                f"{net.branch_names[branch]}: "
                + _describe("value", pair.nominal_ohms[m], pair.estimated_ohms[m])
                for m, branch in enumerate(pair.branches))
            lines.append(f"{rank:>4} {pair.chi2:>10.4g} {fits:>4}  {members}")
    return "\n".join(lines)


def run(args) -> int:
    """Run ``diagnose``; exit 0 once a diagnosis is printed."""
    net, table = read_inputs(args)
    tolerance = read_part_tolerances(args, net)
    # An infinite (open-circuit) resistance reading takes no part in the fit; its band may be 0.
    zero = np.flatnonzero((table.readings.band <= 0) & np.isfinite(table.readings.measured))
    if zero.size and tolerance is None:
        raise InputError(f"{table.path}:{table.lines[zero[0]]}: column 'accuracy': the allowed "
                         "band is 0; diagnose weighs readings by their accuracy, which must be "
                         "positive (or give part tolerances)")
    model = model_readings(args, net, table.readings)
    sources = {"network": args.network, "measurements": args.measurements,
               **({"tolerances": args.tolerances} if args.tolerances else {})}
    if tolerance is not None:
        return _run_parts(args, net, table, model, tolerance, sources)
    comparison = compare(model)
    feedback(args).stage("ranking single faults of every resistor (screened by bounds, the "
                         "best evaluated exactly)", net.n_nodes)
    with counting_solves(args, model, "ranking"):
        result = diagnose(model, top=args.top, short_ratio=args.short_ratio)
    failed = int((~comparison.passed).sum())
    columns = hypothesis_columns(net, result)
    attrs = {"baseline_chi2": result.baseline_chi2, "readings": int(model.readings.n),
             "readings_failed": failed, "readings_used": int(result.readings_used.size),
             "candidates": result.candidates, "evaluated_exactly": result.evaluated,
             "ranking_exact": result.exact, "short_ratio": result.short_ratio,
             "tied_with_best": result.tied_with_best(),
             "solves": result.solves, "timings_s": {**model.timings, **result.timings},
             "notes": model.notes + result.notes}
    text = _format(net, result, failed, model.readings.n)
    _emit(args, columns, attrs, sources, text, reading_columns(table, model, comparison))
    return EXIT_OK


def _emit(args, columns, attrs, sources, text, readings, flagged=()) -> None:
    if args.output:
        write_table(args, columns,
                    units={"nominal_ohms": "ohm", "estimated_ohms": "ohm"}, attrs=attrs,
                    sources=sources)
    if args.html:
        write_page(args.html, args.force, page(
            "Diagnosis of readings", provenance_record("diagnosis", sources, attrs),
            [("Result", f"<pre>{html.escape(text)}</pre>"),
             ("Hypotheses", table_html(columns)),
             ("Every reading" + (" (flagged readings shaded amber)" if flagged else ""),
              reading_table_html(readings, flagged))]))
    if args.json:
        rows = [dict(zip(columns, values)) for values in zip(*columns.values())]
        print(dumps({"summary": attrs, "hypotheses": rows}))
    else:
        print(text)


def _flag_attrs(table, flagged) -> dict:
    """The flagged readings as parallel arrays (line, test, drop, statistic, limit, offset)."""
    numbers = {name: np.array([getattr(f, field) for f in flagged], np.float64)
               for name, field in (("flagged_chi2_drop", "drop"),
                                   ("flagged_statistic", "statistic"), ("flagged_limit", "limit"),
                                   ("flagged_shift", "shift"), ("flagged_shift_std", "shift_std"))}
    return {"flagged_lines": np.array([table.lines[f.reading] for f in flagged], np.int64),
            "flagged_tests": [f.test for f in flagged], **numbers}


def _run_parts(args, net, table, model, tolerance, sources) -> int:
    bands, spread = model_bands(args, model, tolerance, covariance=True)
    comparison = compare(model, bands.band)
    feedback(args).stage("ranking single and two-fault hypotheses by generalised least squares",
                         net.n_nodes)
    with counting_solves(args, model, "ranking"):
        result = diagnose_parts(model, bands, spread.covariance, top=args.top,
                                short_ratio=args.short_ratio, min_change=args.min_change,
                                significance=args.significance,
                                max_flagged=args.max_flagged,
                                contact_significance=args.contact_significance,
                                contact_max=args.contact_max)
    ranking = result.ranking
    columns = hypothesis_columns(net, ranking, result.pairs)
    attrs = {"fit": "generalised least squares", "band_rule": band_rule_text(bands),
             "coverage_factor": bands.coverage, "significance": result.significance,
             "min_change": args.min_change,
             "baseline_chi2": ranking.baseline_chi2,
             "baseline_chi2_all_readings": result.first_ranking.baseline_chi2,
             "fault_indicated": result.fault_indicated, "single_fault_fits": result.single_fits,
             "chi2_limits": result.limits,
             "contact_significance": result.contact_significance,
             "contact_max_ohms": args.contact_max,
             **_flag_attrs(table, result.flagged),
             "readings": int(model.readings.n),
             "readings_outside_band": int((~comparison.passed).sum()),
             "readings_used": int(ranking.readings_used.size),
             "candidates": ranking.candidates, "evaluated_exactly": ranking.evaluated,
             "ranking_exact": ranking.exact, "short_ratio": ranking.short_ratio,
             "tied_with_best": ranking.tied_with_best(), "solves": ranking.solves,
             "timings_s": {**model.timings, **result.timings},
             "notes": model.notes + result.notes + ranking.notes}
    _emit(args, columns, attrs, sources, _format_parts(net, table, result, bands),
          reading_columns(table, model, comparison, bands),
          [int(table.lines[flag.reading]) for flag in result.flagged])
    return EXIT_OK
