package report

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
)

// Output file names inside the report directory.
const (
	JSONFile = "report.json"
	CSVFile  = "rates.csv"
	ROOTFile = "report.root"
)

// WriteFiles writes report.json, rates.csv and the plots into dir, which
// must exist. report.root is written by Run (Options.RootFile).
func (r *Report) WriteFiles(dir string) error {
	data, err := r.JSON()
	if err != nil {
		return err
	}
	if err := os.WriteFile(filepath.Join(dir, JSONFile), data, 0o644); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	if err := os.WriteFile(filepath.Join(dir, CSVFile), r.CSV(), 0o644); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	return r.WritePlots(dir)
}

// JSON returns report.json: indented, with a final newline. The same
// report always gives the same bytes.
func (r *Report) JSON() ([]byte, error) {
	data, err := json.MarshalIndent(r, "", "  ")
	if err != nil {
		return nil, fmt.Errorf("report: encode JSON: %w", err)
	}
	return append(data, '\n'), nil
}

// csvHeader is the first line of rates.csv.
var csvHeader = []string{
	"menu", "rule", "index", "prescale", "passed", "kept",
	"rate_before_hz", "rate_before_err_hz", "rate_after_hz", "rate_after_err_hz",
	"unique_hz", "unique_err_hz", "cumulative_hz", "cumulative_err_hz",
	"scaled_after_hz", "scaled_after_err_hz",
}

func num(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// CSV returns rates.csv: one row per rule of the menu, then a "total"
// row, then the rows of the compared menu if any (without unique and
// cumulative rates). Numbers are printed in full precision; empty cells
// mean "not applicable".
func (r *Report) CSV() []byte {
	var buf bytes.Buffer
	w := csv.NewWriter(&buf)
	_ = w.Write(csvHeader)
	for i, rr := range r.Rules {
		row := []string{r.Menu.Name, rr.Name, strconv.Itoa(rr.Index), strconv.Itoa(rr.Prescale),
			strconv.FormatUint(rr.Before.Events, 10), strconv.FormatUint(rr.After.Events, 10),
			num(rr.Before.RateHz), num(rr.Before.ErrorHz), num(rr.After.RateHz), num(rr.After.ErrorHz),
			num(rr.Unique.RateHz), num(rr.Unique.ErrorHz), num(rr.Cumulative.RateHz), num(rr.Cumulative.ErrorHz), "", ""}
		if r.Scaling != nil {
			row[14], row[15] = num(r.Scaling.Rules[i].RateHz), num(r.Scaling.Rules[i].ErrorHz)
		}
		_ = w.Write(row)
	}
	total := []string{r.Menu.Name, "total", "", "", "", strconv.FormatUint(r.Total.Events, 10),
		"", "", num(r.Total.RateHz), num(r.Total.ErrorHz), "", "", "", "", "", ""}
	if r.Scaling != nil {
		total[14], total[15] = num(r.Scaling.Total.RateHz), num(r.Scaling.Total.ErrorHz)
	}
	_ = w.Write(total)
	if c := r.Comparison; c != nil {
		for _, cr := range c.Rules {
			if cr.OtherAfter == nil {
				continue
			}
			_ = w.Write([]string{c.Menu.Name, cr.Name, "", "", strconv.FormatUint(cr.OtherBefore.Events, 10), strconv.FormatUint(cr.OtherAfter.Events, 10),
				num(cr.OtherBefore.RateHz), num(cr.OtherBefore.ErrorHz), num(cr.OtherAfter.RateHz), num(cr.OtherAfter.ErrorHz),
				"", "", "", "", "", ""})
		}
		_ = w.Write([]string{c.Menu.Name, "total", "", "", "", strconv.FormatUint(c.Total.OtherAfter.Events, 10),
			"", "", num(c.Total.OtherAfter.RateHz), num(c.Total.OtherAfter.ErrorHz), "", "", "", "", "", ""})
	}
	w.Flush()
	return buf.Bytes()
}
