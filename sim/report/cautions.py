"""The cautions every output carries (the command line prints them, the report shows them; the
README's 'Cautions' section says the same)."""

__all__ = ["CAUTION"]

CAUTION = ("HazardTrace is a modelling aid, not for clinical decisions about individual patients; results "
           "depend on the inputs. Follow local HTA guidance and have models reviewed by qualified people.")
