module brightfold

go 1.26

require (
	fyne.io/fyne/v2 v2.7.1 // indirect
	github.com/klauspost/compress v1.15.15 // indirect
	github.com/klauspost/pgzip v1.2.5 // indirect
	github.com/okieraised/gonii v0.6.0 // indirect
	github.com/suyashkumar/dicom v1.1.0 // indirect
	github.com/yalue/onnxruntime_go v1.27.0 // indirect
	golang.org/x/exp v0.0.0-20240525044651-4c93da0ed11d // indirect
	golang.org/x/text v0.22.0 // indirect
	google.golang.org/protobuf v1.36.12 // indirect
)
