"""Reference models built with outside libraries, used by the tests as independent checks."""
