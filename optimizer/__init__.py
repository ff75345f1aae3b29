"""brace: robustness-aware whole-body trajectory optimization.

Layers, top to bottom, each importing only from the ones below it (the
contract is in pyproject.toml and checked by the test suite):

- ``optimizer.cli``            the ``brace`` command
- ``optimizer.report``         figures and pages made from plans
- ``optimizer.planner``        the Planner: seed, objective, certified margins
- ``optimizer.analysis``       margins, certification, diagnosis (reads plans)
- ``optimizer.solver``         NLP solver backends behind one interface
- ``optimizer.transcription``  the direct-transcription NLP as data
- ``optimizer.problem``        task, terrain, contacts, limit rows (no solver); ``optimizer.planfile``
- ``optimizer.robot``          robot model (Pinocchio) and its symbolic CasADi twin
- basics: ``errors``, ``files``, ``schema``, ``capture``
"""
__version__ = "0.1.0"

# The Python API, imported on first use so ``brace --help`` stays fast:
#   optimizer.load_task(path), optimizer.solve(task, objective=...), optimizer.Planner(...),
#   optimizer.save_plan(plan, path), optimizer.load_plan(path),
#   optimizer.certify_plan(plan), optimizer.load_robot(path),
#   optimizer.check_plan(plan), optimizer.ModelChange(friction_scale=...)
_API = {
    "load_task": "optimizer.problem.task",
    "solve": "optimizer.planner",
    "Planner": "optimizer.planner",
    "save_plan": "optimizer.planfile",
    "load_plan": "optimizer.planfile",
    "certify_plan": "optimizer.analysis.certify",
    "check_plan": "optimizer.analysis.plan_check",
    "ModelChange": "optimizer.analysis.model_change",
    "load_robot": "optimizer.robot.model",
}


def __getattr__(name):
    if name in _API:
        import importlib
        return getattr(importlib.import_module(_API[name]), name)
    raise AttributeError(f"module 'optimizer' has no attribute '{name}'")
