"""Live alignment of a preamp: the gain curve against a reference, its measures and hints.

``curve`` measures one refresh (peak, -3 dB edges, target coverage), ``reference`` holds the
receiver-alone reference, ``hints`` turns the passband fit and stagger plan into words, and
``tracker`` keeps the best curve and builds each displayed frame.
"""
