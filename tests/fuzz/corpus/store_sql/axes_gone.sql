DELETE FROM sweep_axes;
