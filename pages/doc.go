// Package pages renders discrimen's HTML pages and their SVG charts:
// report.html from a *recovery.Report (Report), and the page of what each
// hypothesis predicts for one design (Predictions). It reads the numbers
// and never computes them: every value on a page is in the report or the
// predictions passed in, including the method constants the method notes
// quote (recovery.Report.Method), so a page change never touches a result
// and a stored report renders with its own settings.
//
// Conventions. A page is one self-contained document: inline CSS and SVG,
// no scripts, no external references, no fonts fetched (charts name
// Liberation Sans with metric-equal fallbacks). Every string from a study
// is escaped, by html/template in the page and by vgsvg in the charts.
// Numbers are printed with a typographic minus; a report number that is
// not finite (NaN or ±Inf, null in report.json) prints as a dash. Hypothesis i
// keeps colour i of one qualitative set of 12 on every chart and swatch.
// Rendering is deterministic: the same input gives the same bytes.
//
// Errors. A nil report or design is a caller's bug and panics with a
// "pages:" message; a report or prediction set that cannot be drawn (a
// matrix of the wrong shape, a field whose length does not match the
// design's CTIs) is a returned error.
package pages
