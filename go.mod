module lineshot

go 1.26.8

require (
	gocv.io/x/gocv v0.32.0
	gonum.org/v1/gonum v0.17.0
)

require (
	github.com/spf13/pflag v1.1.0 // indirect
	golang.org/x/tools v0.36.0 // indirect
)
