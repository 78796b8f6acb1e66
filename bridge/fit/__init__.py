"""Level-1 cards from measurements and from any model card ngspice runs (`biasbridge fit`).

``data`` reads and checks the bench CSV (polarity-normalised) → ``estimate`` gives the first
values by published extraction methods → ``least_squares`` fits VTO, KP, LAMBDA (GAMMA, PHI)
of the level-1 device of ``bridge.devices.mos1`` → ``card`` writes the ``.model`` card;
``datasheet`` takes two saturation points; ``equivalent`` fits the level-1 equivalent of
another card from its I–V grid simulated by ngspice (``bridge.sim.device_iv``).
"""
