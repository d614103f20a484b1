"""Error bounds of artifacts: what each generated program may differ from the trained model.

``ranges``  exact pre-activation ranges over boxes of the input domain.
``search``  adversarial search for the largest error inside a box (a lower bound, for tests,
            tightness figures and ``diff``).
"""
