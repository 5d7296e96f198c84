"""Ctrl-C while a sampler library is calling our log-probability.

The same holds for SIGTERM, which the command line turns into the same KeyboardInterrupt.

emcee and dynesty call the user's function through wrappers that catch every exception,
print the arguments and a traceback, and re-raise: an interrupt arriving there would end
a run with a screen of traceback. :class:`DeferredInterrupt` holds it back to the end of
the sampler step, where the driver raises it outside the library's wrapper.
"""

__all__ = ["DeferredInterrupt", "request_stop", "STOP"]

#: set by the command line's signal handler (:func:`request_stop`). A KeyboardInterrupt
#: raised by a signal handler is lost when the signal lands while Python runs a weakref
#: or ``__del__`` callback (it is printed as "Exception ignored" and the run goes on);
#: :meth:`DeferredInterrupt.check` also looks here, so the next step stops anyway.
STOP = {"requested": False}


def request_stop(signum=None, frame=None):
    """Signal handler: remember the request and raise KeyboardInterrupt."""
    STOP["requested"] = True
    raise KeyboardInterrupt


class DeferredInterrupt:
    """Call ``fn``; a KeyboardInterrupt inside it is raised later, by :meth:`check`.

    The interrupted call is made again, so the step completes exactly as without the
    interrupt (the log-probability is a pure function): the sampler's state stays valid
    and the driver stops cleanly between steps. A second interrupt before :meth:`check`
    is not held back.
    """

    def __init__(self, fn):
        self.fn, self.pending = fn, False

    def __call__(self, *args):
        """Return ``fn(*args)``, calling it again if a first interrupt cut it short."""
        while True:
            try:
                return self.fn(*args)
            except KeyboardInterrupt:
                if self.pending:
                    raise
                self.pending = True

    def check(self, *args, **kwargs):
        """Raise the held-back KeyboardInterrupt, if any.

        Ignores its arguments, so it can serve as a library's per-iteration callback.
        """
        if self.pending or STOP["requested"]:
            self.pending = STOP["requested"] = False
            raise KeyboardInterrupt
