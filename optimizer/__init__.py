"""brace: robustness-aware whole-body trajectory optimization.

Layers, each importing only from the ones above it:

- ``optimizer.robot``          robot model (Pinocchio) and its symbolic CasADi twin
- ``optimizer.problem``        task, terrain, contacts, disturbances (no solver)
- ``optimizer.transcription``  the direct-transcription NLP as data
- ``optimizer.solver``         thin adapter to Ipopt
- ``optimizer.analysis``       margins, certification, diagnosis (reads plans)
- ``optimizer.cli``            the ``brace`` command
"""
__version__ = "0.1.0"

# The Python API, imported on first use so ``brace --help`` stays fast:
#   optimizer.load_task(path), optimizer.solve(task, objective=...), optimizer.Planner(...),
#   optimizer.save_plan(plan, path), optimizer.load_plan(path),
#   optimizer.certify_plan(plan), optimizer.load_robot(path)
_API = {
    "load_task": "optimizer.problem.task",
    "solve": "optimizer.planner",
    "Planner": "optimizer.planner",
    "save_plan": "optimizer.planfile",
    "load_plan": "optimizer.planfile",
    "certify_plan": "optimizer.analysis.certify",
    "load_robot": "optimizer.robot.model",
}


def __getattr__(name):
    if name in _API:
        import importlib
        return getattr(importlib.import_module(_API[name]), name)
    raise AttributeError(f"module 'optimizer' has no attribute '{name}'")
