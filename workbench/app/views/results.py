import streamlit as st

st.title("results")
