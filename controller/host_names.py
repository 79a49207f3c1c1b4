# CPython only: how a controller module gives the host back the names it keeps private on the
# board (`_NAME = const(...)` costs no RAM there; host code and tests still write NAME).
# Each *_host.py module lists its names and calls publish() from its own publish(ns).


def publish(ns, src, names, private):
    """Into namespace ns (the controller module's globals): each of names from src (the
    *_host module's globals), and each private constant _NAME of ns again as NAME."""
    for name in names:
        ns[name] = src[name]
    for name in private:
        ns[name] = ns["_" + name]
