"""Error bounds of artifacts: what each generated program may differ from the trained model.

``ranges``  exact pre-activation ranges over boxes of the input domain.
``certificate``  the certified bound of an artifact configuration (:func:`certify`), which emit
            writes into the artifact, inspect prints, select's precision budget uses and verify
            recomputes; ``floating``/``fixed`` the per-box error models; ``programs`` what each
            target executes; ``activations`` the proven (or stated) activation errors;
            ``branch`` the branch and bound over the box.
``search``  adversarial search for the largest error inside a box (a lower bound, for tests,
            tightness figures and ``diff``).
"""

from nodecast.compiler.bounds.certificate import Certificate, certify

__all__ = ["Certificate", "certify"]
