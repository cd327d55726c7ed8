module lineshot

go 1.26.8

require gonum.org/v1/gonum v0.17.0

require golang.org/x/tools v0.36.0 // indirect
