package report

// SchemaName and SchemaVersion identify the report.json format
// (docs/report-format.md). The version changes when a field changes
// meaning or goes away; new fields may be added within a version.
const (
	SchemaName    = "bunchsieve-report"
	SchemaVersion = 1
)

// Caveat is the report's own statement of where its numbers come from.
const Caveat = "Rates and efficiencies come from the generator models, the detector description and the sample " +
	"replayed; in the demo scenario (the invented Lantern detector at the invented Meridian ring) they are not " +
	"measurements and describe no real experiment."

// Report is the rates and efficiency report, as written to report.json.
// Every field is filled by Run; optional sections are nil when not asked
// for. It holds no timestamps, so the same input gives the same bytes. It
// is plain data: its methods only read it and are safe for concurrent use.
type Report struct {
	Schema        string `json:"schema"`
	SchemaVersion int    `json:"schema_version"`
	Caveat        string `json:"caveat"`
	Producer      string `json:"producer"`

	Sample     SampleInfo     `json:"sample"`
	Processing ProcessingInfo `json:"processing"`
	Menu       MenuInfo       `json:"menu"`
	// ConfidenceLevel is the level of every efficiency interval.
	ConfidenceLevel float64 `json:"confidence_level"`

	Rules   []RuleRates `json:"rules"`
	Total   Rate        `json:"total"`
	Overlap Overlap     `json:"overlap"`

	Scaling      *Scaling     `json:"scaling"`
	Scans        []Scan       `json:"scans"`
	Efficiencies []Efficiency `json:"efficiencies"`
	Comparison   *Comparison  `json:"comparison"`
}

// SampleInfo describes the replayed sample and the machine conditions
// that turn fractions of crossings into rates.
type SampleInfo struct {
	Kind            string  `json:"kind"` // "stream" or "generator"
	Path            string  `json:"path,omitempty"`
	Generator       string  `json:"generator"`
	GeneratorConfig string  `json:"generator_config"`
	Seed            uint64  `json:"seed"`
	Mu              float64 `json:"mu"` // 0: not known
	Run             uint32  `json:"run"`
	Sources         int     `json:"sources"`
	Truth           bool    `json:"truth"`
	Weighted        bool    `json:"weighted"`
	Detector        string  `json:"detector"`
	FillingScheme   string  `json:"filling_scheme"`
	CollidingBunch  int     `json:"colliding_bunches"`
	RevolutionHz    float64 `json:"revolution_hz"`
	CrossingRateHz  float64 `json:"crossing_rate_hz"`
}

// ProcessingInfo is what the replay saw.
type ProcessingInfo struct {
	// Crossings is the number of events decided: the denominator of every
	// rate.
	Crossings        uint64  `json:"crossings"`
	EventsComplete   uint64  `json:"events_complete"`
	EventsIncomplete uint64  `json:"events_incomplete"`
	SumWeights       float64 `json:"sum_weights"`
	SumWeights2      float64 `json:"sum_weights2"`
	Fragments        struct {
		Received      uint64 `json:"received"`
		InEvents      uint64 `json:"in_events"`
		Duplicate     uint64 `json:"duplicate"`
		Late          uint64 `json:"late"`
		Malformed     uint64 `json:"malformed"`
		UnknownSource uint64 `json:"unknown_source"`
		OutOfTime     uint64 `json:"out_of_time"`
	} `json:"fragments"`
	Batches            uint64 `json:"batches"`
	BatchesUndecodable uint64 `json:"batches_undecodable"`
	TruthRecords       uint64 `json:"truth_records"`
	TruthMatched       uint64 `json:"truth_matched"`
	// InputError is the damage that ended reading a stream early, or "".
	InputError string `json:"input_error"`
}

// MenuInfo identifies a menu.
type MenuInfo struct {
	Name        string `json:"name"`
	Hash        string `json:"hash"`
	File        string `json:"file"`
	PrescaleSet string `json:"prescale_set"`
}

// Rate is a weighted count of events and the rate it stands for, with the
// standard error (docs/report-format.md gives the formula).
type Rate struct {
	Events  uint64  `json:"events"`
	SumW    float64 `json:"sum_w"`
	SumW2   float64 `json:"sum_w2"`
	RateHz  float64 `json:"rate_hz"`
	ErrorHz float64 `json:"error_hz"`
}

// RuleRates are one rule's rates. Before is the condition alone, After
// the rule after its prescale, Unique the events this rule kept and no
// other, Cumulative the events kept by this rule or any before it in menu
// order.
type RuleRates struct {
	Name        string `json:"name"`
	Index       int    `json:"index"`
	Condition   string `json:"condition"`
	Prescale    int    `json:"prescale"` // 0: off or disabled
	Disabled    bool   `json:"disabled"`
	PassThrough bool   `json:"pass_through"`
	Before      Rate   `json:"before_prescale"`
	After       Rate   `json:"after_prescale"`
	Unique      Rate   `json:"unique"`
	Cumulative  Rate   `json:"cumulative"`
}

// Overlap gives, for every pair of rules (i, j), the events both passed
// (before prescale) and both kept (after prescale). Fraction[i][j] is the
// share of rule i's passing weight that rule j passes too.
type Overlap struct {
	Rules          []string    `json:"rules"`
	PassedEvents   [][]uint64  `json:"passed_events"`
	PassedRateHz   [][]float64 `json:"passed_rate_hz"`
	PassedFraction [][]float64 `json:"passed_fraction"`
	KeptEvents     [][]uint64  `json:"kept_events"`
	KeptRateHz     [][]float64 `json:"kept_rate_hz"`
}

// Scaling is the menu's rates scaled linearly to another luminosity.
type Scaling struct {
	FromLumi float64 `json:"from_lumi_cm2s"`
	ToLumi   float64 `json:"to_lumi_cm2s"`
	Factor   float64 `json:"factor"`
	// Validity says when the linear scaling holds and when it does not.
	Validity string `json:"validity"`
	// MuAtSameBunches is the pile-up the target luminosity would give with
	// the sample's filling scheme (0 when the sample's mu is unknown): a
	// sample regenerated at that pile-up is what it takes to know the
	// rates there.
	MuAtSameBunches float64      `json:"mu_at_same_bunches"`
	Rules           []ScaledRate `json:"rules"`
	Total           ScaledRate   `json:"total"`
}

// ScaledRate is a rate after prescale, scaled.
type ScaledRate struct {
	Name    string  `json:"name"`
	RateHz  float64 `json:"rate_hz"`
	ErrorHz float64 `json:"error_hz"`
}

// Scan is the rate of a rule as one of its thresholds moves.
type Scan struct {
	Rule      string      `json:"rule"`
	Param     string      `json:"param"`
	Threshold string      `json:"threshold"` // the comparison scanned, as in the condition
	Nominal   float64     `json:"nominal_gev"`
	Prescale  int         `json:"prescale"`
	Points    []ScanPoint `json:"points"`
}

// ScanPoint is the scanned rule with its threshold at ThresholdGeV.
type ScanPoint struct {
	ThresholdGeV float64 `json:"threshold_gev"`
	Condition    string  `json:"condition"`
	Before       Rate    `json:"before_prescale"`
	After        Rate    `json:"after_prescale"`
}

// Efficiency is the turn-on curve of a rule's condition (before
// prescale) versus a reference quantity.
type Efficiency struct {
	Rule      string   `json:"rule"`
	Reference string   `json:"reference"`
	About     string   `json:"about"`
	Unit      string   `json:"unit"`
	Bins      []EffBin `json:"bins"`
	Underflow EffCount `json:"underflow"`
	Overflow  EffCount `json:"overflow"`
	Undefined uint64   `json:"undefined"` // events without the reference quantity
	Fit       *ErfFit  `json:"fit"`
	FitError  string   `json:"fit_error"`
}

// EffCount is a number of events and how many of them passed.
type EffCount struct {
	Total uint64 `json:"total"`
	Pass  uint64 `json:"pass"`
}

// EffBin is one bin of a turn-on curve, with the Clopper-Pearson interval
// at the report's confidence level. Efficiency, Lower and Upper are null
// for an empty bin.
type EffBin struct {
	Lo         float64  `json:"lo"`
	Hi         float64  `json:"hi"`
	Total      uint64   `json:"total"`
	Pass       uint64   `json:"pass"`
	Efficiency *float64 `json:"efficiency"`
	Lower      *float64 `json:"lower"`
	Upper      *float64 `json:"upper"`
}

// ErfFit is the error-function fit of a turn-on curve: eff(x) = plateau
// (1 + erf((x - x50) / (sqrt(2) sigma))) / 2.
type ErfFit struct {
	X50        float64 `json:"x50"`
	X50Err     float64 `json:"x50_err"`
	Sigma      float64 `json:"sigma"`
	SigmaErr   float64 `json:"sigma_err"`
	Plateau    float64 `json:"plateau"`
	PlateauErr float64 `json:"plateau_err"`
	// PlateauFixed is true when the best plateau would exceed 1 and was
	// fixed at 1 (PlateauErr 0).
	PlateauFixed bool          `json:"plateau_fixed"`
	Covariance   [3][3]float64 `json:"covariance"`
	Deviance     float64       `json:"deviance"`
	NDF          int           `json:"ndf"`
	// PValue is the chi-square tail probability of the deviance
	// (stats.TurnOnFit.PValue); null without degrees of freedom.
	PValue *float64 `json:"p_value"`
}

// Comparison puts another menu's rates beside the report's menu, rule by
// rule (matched by name) and in total.
type Comparison struct {
	Menu  MenuInfo       `json:"menu"`
	Rules []ComparedRule `json:"rules"`
	Total ComparedRates  `json:"total"`
}

// ComparedRule is one rule name in either menu.
type ComparedRule struct {
	Name string `json:"name"`
	In   string `json:"in"` // "both", "menu" or "other"
	ComparedRates
}

// ComparedRates holds the two menus' rates after prescale (before
// prescale for rules) and their difference other - menu, whose error
// counts that both come from the same events.
type ComparedRates struct {
	MenuBefore      *Rate   `json:"menu_before_prescale"`
	OtherBefore     *Rate   `json:"other_before_prescale"`
	MenuAfter       *Rate   `json:"menu_after_prescale"`
	OtherAfter      *Rate   `json:"other_after_prescale"`
	DiffAfterHz     float64 `json:"difference_after_hz"`
	DiffAfterErrHz  float64 `json:"difference_after_error_hz"`
	DiffBeforeHz    float64 `json:"difference_before_hz"`
	DiffBeforeErrHz float64 `json:"difference_before_error_hz"`
}
