import warnings

# colour-science warns at import that matplotlib is absent; the tests never plot.
warnings.filterwarnings("ignore", message=".*Matplotlib.*")
