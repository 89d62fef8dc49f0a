"""Command line: placeholder until the run is wired."""


def main(argv=None) -> int:
    return 0
