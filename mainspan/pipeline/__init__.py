"""Pipeline: the plan stages called in one place (plan_layout), the checks and the pre-flight of outputs."""
