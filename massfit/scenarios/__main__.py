"""``python -m massfit.scenarios`` rewrites every invented example."""

from massfit.scenarios.examples import write_all

write_all()
