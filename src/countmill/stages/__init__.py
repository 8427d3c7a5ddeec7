"""Conversion stages: the registry and its built-in entries."""

from countmill.stages.registry import STAGES, Stage, StageContext, StageParams, StageResult, all_stages, get_stage, register

__all__ = ["STAGES", "Stage", "StageContext", "StageParams", "StageResult", "all_stages", "get_stage", "register"]
