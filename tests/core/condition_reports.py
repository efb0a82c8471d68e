"""Hand-made condition reports for tests of the rules that read them."""

from service.core.conditions import (
    CONDITION_NAMES,
    Condition,
    ConditionReport,
    InfluenceCondition,
    MulticollinearityCondition,
)


def cond(holds, *tests):
    """A condition with ``holds`` and the given typed tests."""
    return Condition(holds, tests, "a note", "a rule")


def report(default=True, **conds):
    """A report whose conditions are ``default`` (holds, no tests) unless given by name."""
    out = {c: cond(default) for c in CONDITION_NAMES} | conds
    mc, inf = out.pop("multicollinearity"), out.pop("influence")
    return ConditionReport(
        **out,
        multicollinearity=MulticollinearityCondition(
            mc.holds, mc.tests, mc.note, mc.rule, "ok" if mc.holds else "fail", (), None
        ),
        influence=InfluenceCondition(inf.holds, inf.tests, inf.note, inf.rule, (), 0),
    )
