"""Entry point for spark-submit: `pkasite predict --engine spark` with the arguments given.

    spark-submit --master yarn scripts/spark_predict.py INPUT -o OUTPUT [--sites SITES] [--ph 7.4]

pkasite (with its model) must be installed on the driver and on every executor.
"""
import sys

from pkasite.pipeline.cli import main

if __name__ == "__main__":
    main(["predict", "--engine", "spark", *sys.argv[1:]], prog_name="pkasite")
