"""Control schemes: how the controller's output becomes the switch's duty cycle.

One module per scheme.  Each takes the power stage at every corner
(:class:`loopkit.powerstage.StageResult`) and the scheme's own settings and gives
the control-to-output transfer function the compensator works on, with the
scheme's figures and findings per corner.

* :mod:`.peak_current`: peak current-mode control with slope compensation
  (Ridley's continuous-time model in CCM, the current-programmed DCM model of
  Erickson & Maksimovic in DCM).
"""

__all__: list[str] = []
