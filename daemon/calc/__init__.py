"""``heft calc`` as typed requests and plain functions: no argparse, no I/O.

``requests`` holds the value objects (validated on construction), ``compute`` turns a request
into a typed result, ``parts_file`` reads the text of a parts file into a model.
"""
