package web

import "embed"

// pageFS holds the operator's page: plain HTML, JavaScript and SVG, no build
// step. Served at / by the server.
//
//go:embed page
var pageFS embed.FS
