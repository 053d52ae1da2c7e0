"""``python -m massfit.scenarios.examples`` rewrites every invented example."""

from massfit.scenarios.examples import write_all

write_all()
