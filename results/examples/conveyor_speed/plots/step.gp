# step: drawn by specloop from the CSV files in ../series (re-run: gnuplot step.gp)
set datafile separator ','
set key top right box opaque font ',10'
set grid lc rgb '#dddddd' lw 1
set border lc rgb '#555555'
set tics textcolor rgb '#333333'
do for [term in 'svg png'] {
  if (term eq 'svg') { set terminal svg size 900,520 dynamic font 'Helvetica,12' background rgb 'white'; set output 'step.svg' } else { set terminal pngcairo size 1200,693 font 'Helvetica,12' background rgb 'white'; set output 'step.png' }
  set title 'Step response y(t)' font ',13'
  set xlabel 'time (s)'
  set ylabel 'y (m/s)'
  set xrange [0:12.20200231]
  set key outside right top vertical Left reverse box opaque font ',10' samplen 2
  unset object; unset arrow; unset label
  set arrow from 2,1.02 to graph 1,first 1.02 nohead lc rgb '#6a1b9a' dt 3 lw 1.2
  set arrow from 2,0.98 to graph 1,first 0.98 nohead lc rgb '#6a1b9a' dt 3 lw 1.2
  set arrow from 2,graph 0 to 2,graph 1 nohead lc rgb '#6a1b9a' dt 3 lw 1
  set label 'settling 2 s, ±2 % band' at 2,graph 0.05 left offset 0.5,0 textcolor rgb '#6a1b9a' font ',10'
  set arrow from 0.6706931486,graph 0 to 0.6706931486,graph 1 nohead lc rgb '#ef6c00' dt 4 lw 1.2
  set label 'peak-time limit 0.6707 s' at 0.6706931486,graph 0.12 left offset 0.5,0 textcolor rgb '#ef6c00' font ',10'
  plot 1.12 with lines lc rgb '#c62828' dt 2 lw 1.5 title 'overshoot limit 12 %', \
       '../series/step_reference.csv' every 2 using 1:2 with lines lc rgb '#8c8c8c' lw 1.2  title 'reference (P only)', \
       '../series/step_classical.csv' every 2 using 1:2 with lines lc rgb '#c26a1b' lw 2  title 'classical', \
       '../series/step_optimized.csv' every 2 using 1:2 with lines lc rgb '#1f5f99' lw 2  title 'optimized', \
       '../series/step_optimized_nonlinear.csv' every 2 using 1:2 with lines lc rgb '#2e7d32' lw 2 dt (8,4) title 'optimized (nonlinear loop)'
  unset output
}
