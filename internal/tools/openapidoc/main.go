// Command openapidoc prints the OpenAPI document the API serves at
// /v1/openapi.json (api.OpenAPIDocument), for linting in .ci/run.
package main

import (
	"fmt"
	"os"

	"discrimen/api"
)

func main() {
	doc, err := api.OpenAPIDocument()
	if err != nil {
		fmt.Fprintln(os.Stderr, "openapidoc:", err)
		os.Exit(1)
	}
	os.Stdout.Write(doc)
}
