"""cfgcheck: finds the mistakes in fine-tuning configs before the GPU run."""

__version__ = "0.1.0"
