package eval

import (
	"encoding/json"
	"fmt"
	"io"
	"math"
)

// The report of a comparison is a JSON object (what `weft eval --json`
// prints and the run's report folder keeps), written by
// Comparison.MarshalJSON and read by ReadReport:
//
//	{"format": "weft-eval-report", "version": 2, "split": "test",
//	 "character_unit": "", "confidence_level": 0.95,
//	 "bootstrap_block_chars": 2000, "interval_note": "",
//	 "tuned_on_reported_split": false,
//	 "best_baseline": "5-gram kneser_ney",
//	 "best_baseline_validation_bits_per_char": 1.93,
//	 "interpolation_partner": "5-gram kneser_ney", "interpolation_weight": 0.61,
//	 "rows": [Result, ...], "long_range": [...], "frequency_bands": [...]}
//
// Numbers that are not finite are written as null, the one convention of
// every weft JSON file: a value not computed (an interval without a
// bootstrap, the weight of a table without an interpolated row) and an
// infinite one alike. In a row with zero_prob_tokens above 0 a null
// cross-entropy, bits per token, perplexity or bits per character is
// +Inf, and reading restores it.
//
// Version 1, before this field existed, had no "format" or "version"
// key, wrote infinities as the strings "+Inf" and "-Inf" and lacked the
// keys from character_unit to interpolation_partner; ReadReport reads it,
// with those fields empty or NaN. A frozen report of each version is kept
// under testdata.
const (
	ReportFormat  = "weft-eval-report"
	ReportVersion = 2
)

type reportJSON struct {
	Format               string           `json:"format,omitempty"`
	Version              int              `json:"version,omitempty"`
	Split                string           `json:"split"`
	CharacterUnit        string           `json:"character_unit"`
	ConfidenceLevel      jsonFloat        `json:"confidence_level"`
	BlockChars           int              `json:"bootstrap_block_chars"`
	IntervalNote         string           `json:"interval_note"`
	ScoredNote           string           `json:"scored_note,omitempty"`
	TunedOnReported      bool             `json:"tuned_on_reported_split"`
	BestBaseline         string           `json:"best_baseline"`
	BestBaselineValBPC   jsonFloat        `json:"best_baseline_validation_bits_per_char"`
	InterpolationPartner string           `json:"interpolation_partner"`
	Lambda               jsonFloat        `json:"interpolation_weight"`
	Rows                 []Result         `json:"rows"`
	LongRange            []ModelBreakdown `json:"long_range,omitempty"`
	Bands                []ModelBreakdown `json:"frequency_bands,omitempty"`
}

// MarshalJSON writes the report of the comparison, at ReportVersion.
func (c *Comparison) MarshalJSON() ([]byte, error) {
	return json.Marshal(reportJSON{
		Format: ReportFormat, Version: ReportVersion,
		Split: c.Split, CharacterUnit: c.CharacterUnit, ConfidenceLevel: jsonFloat(c.ConfidenceLevel),
		BlockChars: c.BlockChars, IntervalNote: c.IntervalNote, ScoredNote: c.ScoredNote, TunedOnReported: c.TunedOnReported,
		BestBaseline: c.BestBaseline, BestBaselineValBPC: jsonFloat(c.BestBaselineValBPC),
		InterpolationPartner: c.InterpolationPartner, Lambda: jsonFloat(c.Lambda),
		Rows: c.Rows, LongRange: c.LongRange, Bands: c.Bands,
	})
}

// UnmarshalJSON reads a report of any version from 1 to ReportVersion;
// a newer version or another format is an error.
func (c *Comparison) UnmarshalJSON(b []byte) error {
	nan := jsonFloat(math.NaN())
	j := reportJSON{ConfidenceLevel: nan, BestBaselineValBPC: nan, Lambda: nan}
	if err := json.Unmarshal(b, &j); err != nil {
		return err
	}
	switch {
	case j.Format == "" && j.Version == 0:
		// Version 1.
	case j.Format != ReportFormat:
		return fmt.Errorf("eval report: format %q, want %q", j.Format, ReportFormat)
	case j.Version < 1:
		return fmt.Errorf("eval report: bad version %d", j.Version)
	case j.Version > ReportVersion:
		return fmt.Errorf("eval report: version %d newer than supported %d", j.Version, ReportVersion)
	}
	*c = Comparison{
		Split: j.Split, CharacterUnit: j.CharacterUnit, ConfidenceLevel: float64(j.ConfidenceLevel),
		BlockChars: j.BlockChars, IntervalNote: j.IntervalNote, ScoredNote: j.ScoredNote, TunedOnReported: j.TunedOnReported,
		BestBaseline: j.BestBaseline, BestBaselineValBPC: float64(j.BestBaselineValBPC),
		InterpolationPartner: j.InterpolationPartner, Lambda: float64(j.Lambda),
		Rows: j.Rows, LongRange: j.LongRange, Bands: j.Bands,
	}
	return nil
}

// ReadReport reads a report written by Comparison.MarshalJSON (or by an
// older version, as the format comment says).
func ReadReport(r io.Reader) (*Comparison, error) {
	var c Comparison
	if err := json.NewDecoder(r).Decode(&c); err != nil {
		return nil, fmt.Errorf("read eval report: %w", err)
	}
	return &c, nil
}

type breakdownJSON struct {
	Label       string    `json:"label"`
	Tokens      int       `json:"tokens"`
	Characters  int       `json:"characters"`
	Bits        jsonFloat `json:"bits"`
	BitsPerChar jsonFloat `json:"bits_per_char"`
}

// MarshalJSON writes the breakdown, values that are not finite as null.
func (b Breakdown) MarshalJSON() ([]byte, error) {
	return json.Marshal(breakdownJSON{b.Label, b.Tokens, b.Characters, jsonFloat(b.Bits), jsonFloat(b.BitsPerChar)})
}

// UnmarshalJSON reads what MarshalJSON writes; a null bits is +Inf (a
// subset holding a token of probability zero).
func (b *Breakdown) UnmarshalJSON(data []byte) error {
	var j breakdownJSON
	if err := json.Unmarshal(data, &j); err != nil {
		return err
	}
	*b = Breakdown{j.Label, j.Tokens, j.Characters, float64(j.Bits), float64(j.BitsPerChar)}
	if math.IsNaN(b.Bits) {
		b.Bits = math.Inf(1)
		if b.Characters > 0 {
			b.BitsPerChar = math.Inf(1)
		}
	}
	return nil
}
