// Package discrimen holds what the whole module shares: the embedded demo
// study. The program is in cmd/discrimen; the science in models and
// recovery; the service in worker and api.
package discrimen

import _ "embed"

// DemoStudy is testdata/studies/radio-watch.json, an invented scenario (a
// watch officer monitoring radio channels; a panel lamp marks the channel
// expected to carry the next berth number). `discrimen run`, `predict` and
// `validate` use it when no study file is given.
//
//go:embed testdata/studies/radio-watch.json
var DemoStudy []byte
