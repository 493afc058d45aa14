package cohort

import "testing"

func FuzzManifest(f *testing.F) {
	f.Add([]byte("path,label,site\na.nii,1,site-A\n"))
	f.Add([]byte("case_id,nifti_path,dicom_path,label,age,sex,site,notice\nHMRU-0001,HMRU-0001/t1.nii.gz,,1,60,F,site-A,x\n"))
	f.Add([]byte("\ufeffpath\n\"a,b.nii\"\n"))
	f.Fuzz(func(t *testing.T, b []byte) {
		d, err := ParseManifest(b, "/root")
		if err != nil {
			return
		}
		for _, c := range d.Cases {
			if c.Participant == "" || bidsLabel(c.Participant) != c.Participant || len(c.Paths) != 1 {
				t.Fatalf("bad case %+v", c)
			}
		}
	})
}

func FuzzParticipants(f *testing.F) {
	f.Add([]byte("participant_id\tage\tsex\nsub-01\t34\tF\n"))
	f.Add([]byte("participant_id\nsub-01\r\nsub-02\r\n"))
	f.Fuzz(func(t *testing.T, b []byte) {
		cols, rows, err := ParseParticipants(b)
		if err != nil {
			return
		}
		for id, r := range rows {
			if id == "" || bidsLabel(id) != id {
				t.Fatalf("bad id %q", id)
			}
			if len(r) > len(cols)+2 {
				t.Fatalf("row %q has %d cells for %d columns", id, len(r), len(cols))
			}
		}
	})
}

func FuzzBIDSName(f *testing.F) {
	f.Add("sub-01_ses-1_T1w")
	f.Add("sub-01_acq-x_run-1_T1w")
	f.Fuzz(func(t *testing.T, s string) {
		ents, suf, err := ParseBIDSName(s)
		if err != nil {
			return
		}
		if ents[0][0] != "sub" || suf == "" {
			t.Fatalf("%q: %v %q", s, ents, suf)
		}
	})
}
