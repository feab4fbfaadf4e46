package wire

// The HTTP protocol (PROTOCOL.md): two requests.
const (
	PathMarks = "/v2/marks" // JSON MarksRequest -> MarksResponse
	PathPush  = "/v2/push"  // a stream of kind KindPush -> PushResponse
	// ContentType is the media type of a stream body.
	ContentType = "application/x-kermalux-stream"
	// MaxMarksBody bounds a marks request; MaxMarksSessions the sessions it asks for.
	MaxMarksBody     = 8 << 20
	MaxMarksSessions = 100000
)

// MarksRequest asks for the store's high-water marks of a board's sessions.
type MarksRequest struct {
	Board    string   `json:"board"` // lower-case hex public key
	Sessions []string `json:"sessions"`
}

// Mark is the store's last record of a session and its hash (0 and the
// zero hash for none).
type Mark struct {
	Seq  int64  `json:"seq"`
	Head string `json:"head"`
}

// MarksResponse maps each asked session to its mark, and names the store:
// the audience the board signs into what it pushes.
type MarksResponse struct {
	Store string          `json:"store"`
	Marks map[string]Mark `json:"marks"`
}

// PushResponse says what the store did with a stream.
type PushResponse struct {
	Stored     int64            `json:"stored"`
	Duplicates int64            `json:"duplicates"`
	High       map[string]int64 `json:"high"` // each session's mark afterwards
}

// Refusal is the body of every non-200 answer.
type Refusal struct {
	Error  string `json:"error"`  // "malformed", "refused", "not_enrolled", "revoked", "audience", "replay", "gap", "conflict", "busy", "too_large"
	Reason string `json:"reason"` // for a person
}
