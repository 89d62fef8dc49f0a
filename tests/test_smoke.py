import pipeline


def test_package_imports():
    # common practice, no source: the package must import without side effects
    assert pipeline.__version__
