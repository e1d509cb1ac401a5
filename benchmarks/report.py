"""Time of writing the PDF reports and ``summary.xlsx`` (a script, not a test).

Fits the demo traverses FRL-07 ol1 (olivine) and FRL-12 pl1 (plagioclase) and
the joint demo sample FRL-21 with short chains (the report does not depend on
chain length), then times, each ``--repeat`` times on one core:

* the text pages of each report (layout with measured word widths);
* the whole ``report.pdf`` (text pages plus the profile, melt-path and
  posterior figures, drawn here);
* ``summary.xlsx`` of a 500-row summary table (the demo rows repeated).

Usage::

    python benchmarks/report.py [--repeat 3]

The last line reads ``report: text_pages_s=<slowest median> pdf_s=<slowest median>
xlsx_500_rows_s=<median>``.
"""

import argparse
import statistics
import tempfile
import time
import warnings
from pathlib import Path

import pandas as pd
from zoning.demo_data import DEMO_DIR
from zoning.fitting import fit_sample, fit_traverse
from zoning.io import read_traverses
from zoning.io.report import report_pages, sample_report_pages, write_report, write_sample_report
from zoning.io.results import band_digits, summary_number_formats, summary_table, summary_units
from zoning.io.writers import write_xlsx

FERROLYN = DEMO_DIR / "ferrolyn"


def _median_time(func, repeat):
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        func()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # short chains warn, on purpose
        ol = fit_traverse(read_traverses(FERROLYN / "FRL-07_ol1.csv", mineral="olivine")[0],
                          melt={"FeO": 9.8}, n_walkers=16, n_steps=150, seed=3)
        pl = fit_traverse(read_traverses(FERROLYN / "FRL-12_pl1.xlsx",
                                         mineral="plagioclase")[0],
                          melt={"Na2O": 3.1}, kd=2.0, kd_sd=0.3, temperature_c=1150.0,
                          n_walkers=16, n_steps=150, seed=5)
        js = fit_sample(read_traverses(FERROLYN / "FRL-21_olivines.csv", mineral="olivine"),
                        melt={"FeO": 9.8}, n_chains=12, n_sweeps=200, seed=7)
    text, pdf = [], []
    with tempfile.TemporaryDirectory() as tmp:
        for name, result, pages, write in (("olivine", ol, report_pages, write_report),
                                           ("plagioclase", pl, report_pages, write_report),
                                           ("joint", js, sample_report_pages,
                                            write_sample_report)):
            t_text = _median_time(lambda r=result, p=pages: p(r, figures=[]), args.repeat)
            n_pages = len(pages(result, figures=[]))
            t_pdf = _median_time(lambda r=result, w=write: w(r, Path(tmp) / "r.pdf"),
                                 args.repeat)
            text.append(t_text)
            pdf.append(t_pdf)
            print(f"{name:12s} text pages: {n_pages}, {t_text:.2f} s; whole report.pdf "
                  f"{t_pdf:.2f} s")
        df = pd.concat([summary_table([ol, pl])] * 250, ignore_index=True)
        t_xlsx = _median_time(lambda: write_xlsx(
            df, Path(tmp) / "summary.xlsx", units=summary_units(df.columns),
            number_formats=summary_number_formats(df.columns), digits=band_digits(df.columns),
            provenance={"content": "benchmark"}), args.repeat)
        print(f"summary.xlsx with {len(df)} rows: {t_xlsx:.2f} s")
    print(f"report: text_pages_s={max(text):.2f} pdf_s={max(pdf):.2f} "
          f"xlsx_500_rows_s={t_xlsx:.2f}")


if __name__ == "__main__":
    import os

    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")
    main()
