# Shared by the load benchmarks: each run is recorded as "SECONDS PEAK_KIB".
# median RUN...  the median of the runs' seconds
# peak RUN...    the largest of the runs' peak memories, in KiB
median() { printf '%s\n' "$@" | awk '{print $1}' | sort -g | awk '{a[NR]=$1} END {print a[int((NR+1)/2)]}'; }
peak() { printf '%s\n' "$@" | awk '{print $2}' | sort -g | tail -1; }
