# gains: drawn by specloop from the CSV files in ../series (re-run: gnuplot gains.gp)
set datafile separator ','
set key top right box opaque font ',10'
set grid lc rgb '#dddddd' lw 1
set border lc rgb '#555555'
set tics textcolor rgb '#333333'
do for [term in 'svg png'] {
  if (term eq 'svg') { set terminal svg size 900,770 dynamic font 'Helvetica,12' background rgb 'white'; set output 'gains.svg' } else { set terminal pngcairo size 1200,1026 font 'Helvetica,12' background rgb 'white'; set output 'gains.png' }
  unset object; unset arrow; unset label
  set multiplot layout 3,1 title 'Optimized gains (parallel form) across the grid' font ',13'
  set xlabel 'requirements.overshoot\_max\_pct'
  unset logscale x
  set palette defined (0 '#fde725', 0.5 '#21918c', 1 '#440154')
  set cbrange [-1:-60]
  set cbrange [-60:-1]
  set colorbox; set cblabel 'plant.zeros[0]'
  unset key
  set ylabel 'kp'
  plot for [j=0:5] '../series/gains.csv' using ($1 == j ? $2 : NaN):4:3 with linespoints pt 7 ps 0.6 lw 1.5 lc palette notitle
  set ylabel 'ki'
  plot for [j=0:5] '../series/gains.csv' using ($1 == j ? $2 : NaN):5:3 with linespoints pt 7 ps 0.6 lw 1.5 lc palette notitle
  set ylabel 'kd'
  plot for [j=0:5] '../series/gains.csv' using ($1 == j ? $2 : NaN):6:3 with linespoints pt 7 ps 0.6 lw 1.5 lc palette notitle
  unset multiplot
  unset output
}
