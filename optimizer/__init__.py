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
