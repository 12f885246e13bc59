"""Verdicts: multiple-testing control across an audit and the pass / warn / fail / info decision."""
