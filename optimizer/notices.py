"""Cautions printed under every plan, certification report and comparison page."""

SAFETY = ("Safety: this plan is not validated on hardware. Check it in simulation first, run it at "
          "reduced speed and torque limits in a cleared area with an emergency stop at hand, and "
          "follow your local robot-safety rules and qualified staff.")

MODEL_ONLY = ("These figures hold for the robot model, contacts and limits in the plan file; they are "
              "not a rating of the real machine.")
